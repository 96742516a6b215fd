// Fuzz target: loading a model file (JSON parsing, schema and version checks, every field).
#include <cstdint>
#include <nlohmann/json.hpp>
#include <string>

#include "residue/training/model.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  const auto json = nlohmann::json::parse(text, nullptr, false);
  if (json.is_discarded()) return 0;
  (void)residue::model_from_json(json);
  return 0;
}
