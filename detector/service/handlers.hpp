// The handlers of the service's routes (docs/openapi.yaml): the checks on a request's headers
// before any body is read, scoring and explaining an upload, the review page, health, the model,
// reload and metrics, and the answers to what the HTTP library refuses itself.
#pragma once

#include <functional>
#include <string>

#include "service_state.hpp"

namespace residue {

// Sets up every route on `s.server`; `reload` loads the model file again (POST /v1/model/reload).
void add_handlers(ServiceState& s, const std::function<Result<std::string>()>& reload);

}  // namespace residue
