// Fuzz target: decode + every feature family + processing evidence + metadata from arbitrary bytes,
// as `residue scan` and the service run them. The pixel limit is lowered so that one input stays
// fast; every other limit is the default.
#include <cstdint>
#include <span>

#include "residue/features/extract.hpp"
#include "residue/features/metadata.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, size_t size) {
  const std::span<const std::uint8_t> bytes(data, size);
  residue::ExtractOptions options;
  options.limits.max_pixels = 4'000'000;
  options.limits.max_whole_decode_pixels = 4'000'000;
  (void)residue::extract_bytes(bytes, options);
  (void)residue::read_metadata(bytes);
  return 0;
}
