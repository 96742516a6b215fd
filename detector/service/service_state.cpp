#include "service_state.hpp"

#include <chrono>
#include <cstdio>

namespace residue {

void ServiceState::log(const Json& line) {
  std::lock_guard lock(log_mutex);
  if (log_file.is_open()) {
    log_file << record_line(line) << "\n";
    log_file.flush();
    if (!log_file) {  // a full disk must not stop scoring: the log goes to stderr from here on
      log_file.close();
      std::fprintf(stderr,
                   "residue serve: cannot append to the access log (disk full?); logging to stderr\n");
    }
  } else {
    std::fprintf(stderr, "%s\n", record_line(line).c_str());
  }
}

bool ServiceState::acquire() {
  std::unique_lock lock(slots_mutex);
  if (active >= settings.workers && waiting >= settings.queue) return false;
  ++waiting;
  slots_cv.wait(lock, [&] { return active < settings.workers; });
  --waiting;
  ++active;
  return true;
}

void ServiceState::release() {
  {
    std::lock_guard lock(slots_mutex);
    --active;
  }
  slots_cv.notify_one();
}

bool ServiceState::authorised(const httplib::Request& req) const {
  if (settings.token.empty()) return true;
  return req.get_header_value("Authorization") == "Bearer " + settings.token;
}

void ServiceState::observe(const char* route, const httplib::Request& req, httplib::Response& res,
                           const std::function<std::string()>& body) {
  // Routes other than /v1/score have their body (if any) read by the library before this.
  if (std::string_view(route) != "/v1/score" && std::string_view(route) != "/v1/explain") {
    connection_working();
  }
  const auto start = std::chrono::steady_clock::now();
  const auto id = next_id++;
  res.set_header("X-Request-Id", std::to_string(id));
  std::string band;
  try {
    band = body();
  } catch (const std::exception& e) {
    reply(res, 500, error_body("internal", e.what()));
  }
  const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  metrics.observe(route, res.status, seconds, band);
  log({{"id", id},
       {"method", req.method},
       {"path", req.path},
       {"status", res.status},
       {"latency_ms", seconds * 1000.0},
       {"band", band.empty() ? Json(nullptr) : Json(band)}});
}

bool ServiceState::on_a_worker(httplib::Response& res, const std::function<void(const Model&)>& work) {
  if (!acquire()) {
    res.set_header("Retry-After", "1");
    reply(res, 503,
          error_body("overloaded", "all scoring workers are busy and the queue is full; retry shortly"));
    return false;
  }
  const auto model = current();
  try {
    work(*model);
  } catch (...) {
    release();
    throw;
  }
  release();
  return true;
}

}  // namespace residue
