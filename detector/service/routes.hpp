// The service's routes (path, method, whether the bearer token is needed) and the shape of its
// answers: JSON bodies, and errors as {"error": {"code", "message"}, "advisory"} with the HTTP status
// each record error code maps to (docs/openapi.yaml).
#pragma once

#include <httplib.h>

#include <string>

#include "residue/detector/scoring/record.hpp"

namespace residue {

using Json = nlohmann::ordered_json;

struct Route {
  const char* path;
  const char* method;
  bool needs_auth;
};

// The route at `path`, or nullptr.
const Route* find_route(const std::string& path);

Json error_body(const std::string& code, const std::string& message);

// 400 for an empty body, 422 for a file that is not a usable image, 500 otherwise.
int status_for(const std::string& code);

// Answers `body` as JSON with `status`.
void reply(httplib::Response& res, int status, const Json& body);

}  // namespace residue
