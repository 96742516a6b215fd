// Fuzz target: the service's request handling, headers and body to response, without a socket
// (Service::respond). The model comes from RESIDUE_FUZZ_MODEL (scripts/fuzz.sh trains one); a
// bearer token is configured so that the authentication path is exercised as well, and a verdict
// store (in the temporary folder) so that POST /v1/verdicts is.
#include <unistd.h>

#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <memory>
#include <string>
#include <string_view>

#include "residue/detector/service/service.hpp"

namespace {

residue::Service& service() {
  static std::unique_ptr<residue::Service> s = [] {
    const char* model = std::getenv("RESIDUE_FUZZ_MODEL");
    if (model == nullptr) {
      std::fprintf(stderr, "fuzz_service: set RESIDUE_FUZZ_MODEL to a model file\n");
      std::abort();
    }
    residue::ServiceSettings settings;
    settings.token = "fuzz-token";
    settings.access_log = "/dev/null";
    settings.workers = 1;
    settings.max_body_bytes = 1U << 20;
    settings.scan.extract.limits.max_pixels = 4'000'000;
    // Verdicts on, so that POST /v1/verdicts and the remembered vectors are exercised too.
    settings.verdicts = (std::filesystem::temp_directory_path() /
                         ("residue-fuzz-verdicts-" + std::to_string(getpid()) + ".sqlite"))
                            .string();
    settings.remember = 4;
    return std::make_unique<residue::Service>(settings, model);
  }();
  return *s;
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, size_t size) {
  const auto response = service().respond(std::string_view(reinterpret_cast<const char*>(data), size));
  (void)response;
  return 0;
}
