// Fuzz target: the header reader (format sniffing, dimensions, bit depth) on arbitrary bytes.
#include <cstdint>
#include <span>

#include "residue/features/decode.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, size_t size) {
  const std::span<const std::uint8_t> bytes(data, size);
  (void)residue::sniff_format(bytes);
  (void)residue::read_header(bytes);
  return 0;
}
