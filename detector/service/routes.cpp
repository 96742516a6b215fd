#include "routes.hpp"

namespace residue {

namespace {

constexpr Route kRoutes[] = {{"/", "GET", false},
                             {"/v1/score", "POST", true},
                             {"/v1/explain", "POST", true},
                             {"/v1/health", "GET", false},
                             {"/v1/model", "GET", true},
                             {"/v1/model/reload", "POST", true},
                             {"/v1/verdicts", "POST", true},
                             {"/metrics", "GET", false}};

}  // namespace

const Route* find_route(const std::string& path) {
  for (const Route& r : kRoutes) {
    if (path == r.path) return &r;
  }
  return nullptr;
}

Json error_body(const std::string& code, const std::string& message) {
  return {{"error", {{"code", code}, {"message", message}}}, {"advisory", kAdvisoryNotice}};
}

int status_for(const std::string& code) {
  if (code == "empty") return 400;
  if (code == "too-large" || code == "too-small" || code == "truncated" || code == "not-an-image" ||
      code == "unsupported" || code == "corrupt") {
    return 422;
  }
  return 500;
}

void reply(httplib::Response& res, int status, const Json& body) {
  res.status = status;
  res.set_content(record_line(body), "application/json");
}

}  // namespace residue
