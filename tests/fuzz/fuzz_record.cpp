// Fuzz target: the scan-record writer with arbitrary path bytes. Every record must be valid UTF-8
// JSON and give back the exact path (detector/record.hpp, set_path and path_of).
#include <cstdint>
#include <cstdlib>
#include <string>

#include "residue/detector/scoring/record.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, size_t size) {
  const std::string path(reinterpret_cast<const char*>(data), size);
  auto record = residue::error_record(path, {residue::ErrorCode::kUnreadable, "cannot read " + path});
  const std::string line = residue::record_line(record);
  if (!residue::is_valid_utf8(line)) std::abort();
  const auto back = nlohmann::json::parse(line, nullptr, false);
  if (back.is_discarded() || residue::path_of(back) != path) std::abort();
  return 0;
}
