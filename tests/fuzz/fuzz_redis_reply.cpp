// Fuzz target: the Redis reply parser (RESP through hiredis's reader, converted to our replies).
#include <cstdint>
#include <string_view>

#include "residue/detector/queue/redis_client.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, size_t size) {
  (void)residue::parse_redis_replies(std::string_view(reinterpret_cast<const char*>(data), size));
  return 0;
}
