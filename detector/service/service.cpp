// cpp-httplib adapter for the service (with connection_guard.cpp, the only files that include
// httplib.h).
#include "residue/detector/service/service.hpp"

#include <httplib.h>
#include <sys/socket.h>

#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <functional>
#include <map>
#include <mutex>
#include <optional>
#include <span>
#include <thread>

#include "connection_guard.hpp"
#include "residue/detector/scoring/explain.hpp"
#include "residue/detector/scoring/pictures.hpp"
#include "residue/detector/scoring/record.hpp"
#include "review_page.hpp"

namespace residue {

namespace {

using Clock = std::chrono::steady_clock;
using Json = nlohmann::ordered_json;

constexpr double kLatencyBuckets[] = {0.01, 0.025, 0.05, 0.1, 0.15, 0.25, 0.5, 1.0, 2.5, 5.0};

// Counters for /metrics (Prometheus text exposition format 0.0.4).
class Metrics {
 public:
  void observe(const std::string& route, int status, double seconds, const std::string& band) {
    std::lock_guard lock(mutex_);
    ++requests_[{route, status}];
    for (size_t b = 0; b < std::size(kLatencyBuckets); ++b) {
      if (seconds <= kLatencyBuckets[b]) ++buckets_[b];
    }
    ++count_;
    sum_ += seconds;
    if (!band.empty()) ++bands_[band];
  }
  std::string text(int queue_depth, int in_flight, const std::string& model_id, const ConnectionCounts& c) {
    std::lock_guard lock(mutex_);
    std::string t;
    t += "# HELP residue_requests_total HTTP requests by route and status.\n# TYPE residue_requests_total "
         "counter\n";
    for (const auto& [key, n] : requests_) {
      t += "residue_requests_total{route=\"" + key.first + "\",status=\"" + std::to_string(key.second) +
           "\"} " + std::to_string(n) + "\n";
    }
    t += "# HELP residue_request_duration_seconds Time from request read to response.\n"
         "# TYPE residue_request_duration_seconds histogram\n";
    char buf[96];
    for (size_t b = 0; b < std::size(kLatencyBuckets); ++b) {
      std::snprintf(buf, sizeof buf, "residue_request_duration_seconds_bucket{le=\"%g\"} %llu\n",
                    kLatencyBuckets[b], static_cast<unsigned long long>(buckets_[b]));
      t += buf;
    }
    t += "residue_request_duration_seconds_bucket{le=\"+Inf\"} " + std::to_string(count_) + "\n";
    std::snprintf(buf, sizeof buf, "residue_request_duration_seconds_sum %.6f\n", sum_);
    t += buf;
    t += "residue_request_duration_seconds_count " + std::to_string(count_) + "\n";
    t += "# HELP residue_queue_depth Score requests waiting for a worker.\n# TYPE residue_queue_depth gauge\n"
         "residue_queue_depth " +
         std::to_string(queue_depth) + "\n";
    t += "# HELP residue_in_flight Score requests being scored.\n# TYPE residue_in_flight "
         "gauge\nresidue_in_flight " +
         std::to_string(in_flight) + "\n";
    t += "# HELP residue_scores_total Scored images by band.\n# TYPE residue_scores_total counter\n";
    for (const char* band : {"likely-camera", "inconclusive", "likely-generated"}) {
      t += "residue_scores_total{band=\"" + std::string(band) + "\"} " + std::to_string(bands_[band]) + "\n";
    }
    t += "# HELP residue_connections_open HTTP connections open now.\n# TYPE residue_connections_open gauge\n"
         "residue_connections_open " +
         std::to_string(c.open.load()) + "\n";
    t += "# HELP residue_connections_refused_total Connections refused over the cap (503, closed).\n"
         "# TYPE residue_connections_refused_total counter\nresidue_connections_refused_total " +
         std::to_string(c.refused.load()) + "\n";
    t += "# HELP residue_connections_timed_out_total Connections cut for sending a request too slowly.\n"
         "# TYPE residue_connections_timed_out_total counter\n"
         "residue_connections_timed_out_total{phase=\"head\"} " +
         std::to_string(c.head_timeouts.load()) + "\nresidue_connections_timed_out_total{phase=\"body\"} " +
         std::to_string(c.body_timeouts.load()) + "\n";
    t += "# HELP residue_model_info The model being served.\n# TYPE residue_model_info "
         "gauge\nresidue_model_info{id=\"" +
         model_id + "\"} 1\n";
    return t;
  }

 private:
  std::mutex mutex_;
  std::map<std::pair<std::string, int>, unsigned long long> requests_;
  unsigned long long buckets_[std::size(kLatencyBuckets)] = {};
  unsigned long long count_ = 0;
  double sum_ = 0.0;
  std::map<std::string, unsigned long long> bands_;
};

std::span<const std::uint8_t> as_bytes(const std::string& body) {
  return {reinterpret_cast<const std::uint8_t*>(body.data()), body.size()};
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

// The routes, with the one method each takes and whether it needs the bearer token.
struct Route {
  const char* path;
  const char* method;
  bool needs_auth;
};
constexpr Route kRoutes[] = {{"/", "GET", false},           {"/v1/score", "POST", true},
                             {"/v1/explain", "POST", true}, {"/v1/health", "GET", false},
                             {"/v1/model", "GET", true},    {"/v1/model/reload", "POST", true},
                             {"/metrics", "GET", false}};

const Route* find_route(const std::string& path) {
  for (const Route& r : kRoutes) {
    if (path == r.path) return &r;
  }
  return nullptr;
}

// One connection's bytes in memory in place of a socket: what the fuzz target (tests/fuzz/
// fuzz_service.cpp) feeds the server.
class MemoryStream : public httplib::Stream {
 public:
  explicit MemoryStream(std::string_view input) : input_(input) {}
  [[nodiscard]] bool is_readable() const override { return at_ < input_.size(); }
  [[nodiscard]] bool is_writable() const override { return true; }
  ssize_t read(char* ptr, size_t size) override {
    const size_t n = std::min(size, input_.size() - at_);
    std::copy_n(input_.data() + at_, n, ptr);
    at_ += n;
    return static_cast<ssize_t>(n);
  }
  ssize_t write(const char* ptr, size_t size) override {
    output_.append(ptr, size);
    return static_cast<ssize_t>(size);
  }
  void get_remote_ip_and_port(std::string& ip, int& port) const override {
    ip = "127.0.0.1";
    port = 0;
  }
  void get_local_ip_and_port(std::string& ip, int& port) const override {
    ip = "127.0.0.1";
    port = 0;
  }
  [[nodiscard]] socket_t socket() const override { return INVALID_SOCKET; }
  [[nodiscard]] const std::string& output() const { return output_; }

 private:
  std::string_view input_;
  size_t at_ = 0;
  std::string output_;
};

// The HTTP library's server, able to answer one request given as bytes.
class RequestServer : public httplib::Server {
 public:
  std::string respond(std::string_view request) {
    MemoryStream stream(request);
    bool closed = false;
    process_request(stream, true, closed, nullptr);
    return stream.output();
  }
  // The library listens with a backlog of 5: a burst of connections beyond it has its SYNs dropped
  // and each such client waits a second for the retransmission. Listening again raises it.
  void widen_backlog() { ::listen(svr_sock_, SOMAXCONN); }
};

std::atomic<bool> g_reload_requested{false};
extern "C" void on_sighup(int /*signal*/) { g_reload_requested = true; }

}  // namespace

bool is_loopback(const std::string& host) {
  return host == "localhost" || host == "::1" || host.rfind("127.", 0) == 0;
}

struct Service::State {
  ServiceSettings settings;
  std::string model_path;
  RequestServer server;
  bool prepared = false;
  std::mutex model_mutex;
  std::shared_ptr<const Model> model;
  std::mutex slots_mutex;
  std::condition_variable slots_cv;
  int active = 0;   // scoring now
  int waiting = 0;  // admitted, waiting for a worker
  Metrics metrics;
  std::mutex log_mutex;
  std::ofstream log_file;
  std::atomic<unsigned long long> next_id{1};
  std::atomic<bool> stopping{false};
  std::thread reload_watcher;
  std::shared_ptr<ConnectionCounts> connections = std::make_shared<ConnectionCounts>();

  std::shared_ptr<const Model> current() {
    std::lock_guard lock(model_mutex);
    return model;
  }

  void log(const Json& line) {
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

  // Waits for a scoring slot; false when the waiting queue is full (the caller answers 503).
  bool acquire() {
    std::unique_lock lock(slots_mutex);
    if (active >= settings.workers && waiting >= settings.queue) return false;
    ++waiting;
    slots_cv.wait(lock, [&] { return active < settings.workers; });
    --waiting;
    ++active;
    return true;
  }
  void release() {
    {
      std::lock_guard lock(slots_mutex);
      --active;
    }
    slots_cv.notify_one();
  }

  bool authorised(const httplib::Request& req) const {
    if (settings.token.empty()) return true;
    return req.get_header_value("Authorization") == "Bearer " + settings.token;
  }
};

Service::Service(ServiceSettings settings, std::string model_path) : state_(std::make_unique<State>()) {
  if (settings.workers <= 0)
    settings.workers = static_cast<int>(std::max(1U, std::thread::hardware_concurrency()));
  state_->settings = std::move(settings);
  state_->model_path = std::move(model_path);
}

Service::~Service() { stop(); }

Result<std::string> Service::load_model() {
  auto loaded = residue::load_model(state_->model_path);
  if (!loaded) return loaded.error();
  auto next = std::make_shared<const Model>(std::move(*loaded));
  std::lock_guard lock(state_->model_mutex);
  state_->model = next;
  return next->id;
}

int Service::port() const { return state_->settings.port; }

void Service::stop() {
  if (state_->stopping.exchange(true)) return;
  state_->server.stop();
  if (state_->reload_watcher.joinable()) state_->reload_watcher.join();
}

Result<bool> Service::run() {
  auto ready = prepare();
  if (!ready) return ready.error();
  State& s = *state_;
  const ServiceSettings& cfg = s.settings;
  std::signal(SIGHUP, on_sighup);
  s.reload_watcher = std::thread([this] {
    while (!state_->stopping) {
      if (g_reload_requested.exchange(false)) {
        auto loaded = load_model();
        state_->log({{"event", "reload"},
                     {"trigger", "SIGHUP"},
                     {"ok", loaded.ok()},
                     {"model", loaded ? Json(*loaded) : Json(loaded.error().message)}});
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(100));
    }
  });

  int port = cfg.port;
  if (port == 0) {
    port = s.server.bind_to_any_port(cfg.host);
  } else if (!s.server.bind_to_port(cfg.host, port)) {
    port = -1;
  }
  if (port < 0) {
    stop();
    return make_error(ErrorCode::kUnreadable, "cannot bind " + cfg.host + ":" + std::to_string(cfg.port));
  }
  s.settings.port = port;
  s.server.widen_backlog();
  s.log({{"event", "listening"},
         {"host", cfg.host},
         {"port", port},
         {"model", s.current()->id},
         {"workers", cfg.workers},
         {"queue", cfg.queue}});
  s.server.listen_after_bind();
  return true;
}

std::string Service::respond(std::string_view request) {
  if (!prepare()) return {};
  return state_->server.respond(request);
}

Result<bool> Service::prepare() {
  State& s = *state_;
  if (s.prepared) return true;
  const ServiceSettings& cfg = s.settings;
  if (!is_loopback(cfg.host) && cfg.token.empty() && !cfg.allow_unauthenticated) {
    return make_error(ErrorCode::kUnsupported,
                      "refusing to serve " + cfg.host +
                          " without authentication: give --token-file, or "
                          "--allow-unauthenticated if a proxy in front authenticates");
  }
  if (!cfg.access_log.empty()) {
    s.log_file.open(cfg.access_log, std::ios::app);
    if (!s.log_file)
      return make_error(ErrorCode::kUnreadable, "cannot write the access log " + cfg.access_log);
  }
  if (!s.current()) {
    auto loaded = load_model();
    if (!loaded) return loaded.error();
  }
  auto& server = s.server;
  // One thread per connection, so that idle or slow clients cannot starve the others; our own
  // admission control (workers + queue) decides who waits for scoring and who gets 503.
  server.new_task_queue = [&s] {
    const ServiceSettings& c = s.settings;
    ConnectionLimits limits;
    limits.port = c.port;  // the bound port: run() has set it before listening
    limits.max_connections = c.max_connections;
    limits.header_timeout = std::chrono::seconds(c.header_timeout_seconds);
    limits.body_timeout = std::chrono::seconds(c.body_timeout_seconds);
    const std::string body = record_line(error_body(
        "too-many-connections",
        "the service has " + std::to_string(c.max_connections) + " connections open; retry shortly"));
    limits.refusal =
        "HTTP/1.1 503 Service Unavailable\r\nContent-Type: application/json\r\nContent-Length: " +
        std::to_string(body.size()) + "\r\nRetry-After: 1\r\nConnection: close\r\n\r\n" + body;
    return new ConnectionGuard(limits, s.connections);
  };
  server.set_payload_max_length(cfg.max_body_bytes);
  server.set_read_timeout(cfg.timeout_seconds, 0);
  server.set_write_timeout(cfg.timeout_seconds, 0);

  auto reply = [](httplib::Response& res, int status, const Json& body) {
    res.status = status;
    res.set_content(record_line(body), "application/json");
  };
  // Every request gets an id, a log line and a metrics observation; `body` answers it and returns
  // the band it scored, if any.
  auto observed = [&s, reply](const char* route, const httplib::Request& req, httplib::Response& res,
                              const std::function<std::string()>& body) {
    // Routes other than /v1/score have their body (if any) read by the library before this.
    if (std::string_view(route) != "/v1/score" && std::string_view(route) != "/v1/explain") {
      connection_working();
    }
    const auto start = Clock::now();
    const auto id = s.next_id++;
    res.set_header("X-Request-Id", std::to_string(id));
    std::string band;
    try {
      band = body();
    } catch (const std::exception& e) {
      reply(res, 500, error_body("internal", e.what()));
    }
    const double seconds = std::chrono::duration<double>(Clock::now() - start).count();
    s.metrics.observe(route, res.status, seconds, band);
    s.log({{"id", id},
           {"method", req.method},
           {"path", req.path},
           {"status", res.status},
           {"latency_ms", seconds * 1000.0},
           {"band", band.empty() ? Json(nullptr) : Json(band)}});
  };

  // Route, method, token and declared size are checked on the headers, before any body is read:
  // a stranger cannot make the service read (or wait for) a body it is going to refuse.
  server.set_pre_routing_handler(
      [&s, &cfg, reply, observed](const httplib::Request& req, httplib::Response& res) {
        connection_reading_body();
        const Route* route = find_route(req.path);
        const bool method_ok =
            route != nullptr &&
            (req.method == route->method || (req.method == "HEAD" && std::string(route->method) == "GET"));
        const bool token_ok = route == nullptr || !route->needs_auth || s.authorised(req);
        const bool size_ok =
            !req.has_header("Content-Length") ||
            std::strtoull(req.get_header_value("Content-Length").c_str(), nullptr, 10) <= cfg.max_body_bytes;
        // An upload route with no body at all: the library would refuse to read it with a bare 400.
        const bool upload = route != nullptr && std::string_view(route->method) == "POST" &&
                            std::string_view(route->path) != "/v1/model/reload";
        const bool body_ok = !upload || !req.has_header("Content-Length") ||
                             std::strtoull(req.get_header_value("Content-Length").c_str(), nullptr, 10) > 0;
        if (method_ok && token_ok && size_ok && body_ok) return httplib::Server::HandlerResponse::Unhandled;
        observed(route != nullptr ? route->path : "unknown", req, res, [&] {
          if (route == nullptr) {
            reply(res, 404, error_body("not-found", "no such route; see docs/openapi.yaml"));
          } else if (!method_ok) {
            res.set_header("Allow", route->method);
            reply(res, 405, error_body("method-not-allowed", std::string("use ") + route->method));
          } else if (!token_ok) {
            res.set_header("WWW-Authenticate", "Bearer");
            reply(res, 401, error_body("unauthorised", "missing or wrong bearer token"));
          } else if (!size_ok) {
            reply(res, 413,
                  error_body("too-large", "the request body is over the size limit of " +
                                              std::to_string(cfg.max_body_bytes) + " bytes"));
          } else {
            reply(res, 400, error_body("empty", "the request body is empty: send the image bytes"));
          }
          return std::string();
        });
        // The body, if any, is left unread: the connection cannot carry another request after it.
        if (req.has_header("Content-Length") || req.has_header("Transfer-Encoding")) {
          res.set_header("Connection", "close");
        }
        return httplib::Server::HandlerResponse::Handled;
      });

  // Reads an upload as image bytes, or answers the error and gives nothing. The body is read here
  // rather than by the HTTP library, so that it is taken as image bytes whatever its declared type
  // (curl --data-binary declares a form) and a chunked body is held to the same size limit. A
  // multipart form must carry exactly one part, the file.
  auto read_upload = [&cfg, reply](
                         const httplib::Request& req, httplib::Response& res,
                         const httplib::ContentReader& content_reader) -> std::optional<std::string> {
    std::string body;
    if (req.has_header("Content-Length")) {  // no doubling reallocations for a large upload
      body.reserve(std::min<std::size_t>(
          std::strtoull(req.get_header_value("Content-Length").c_str(), nullptr, 10), cfg.max_body_bytes));
    }
    size_t parts = 0;
    bool too_large = false;
    const auto append = [&](const char* data, size_t n) {
      if (body.size() + n > cfg.max_body_bytes) {
        too_large = true;
        return false;
      }
      body.append(data, n);
      return true;
    };
    const bool read =
        req.is_multipart_form_data()
            ? content_reader([&](const httplib::MultipartFormData&) { return ++parts == 1; }, append)
            : content_reader(append);
    connection_working();
    if (too_large || (!read && res.status == 413)) {
      res.set_header("Connection", "close");
      reply(res, 413,
            error_body("too-large", "the request body is over the size limit of " +
                                        std::to_string(cfg.max_body_bytes) + " bytes"));
      return std::nullopt;
    }
    if (req.is_multipart_form_data() && parts != 1) {
      reply(res, 400, error_body("bad-request", "a multipart upload must carry exactly one file"));
      return std::nullopt;
    }
    if (body.empty()) {  // also a body that never came (Content-Length: 0)
      reply(res, 400, error_body("empty", "the request body is empty: send the image bytes"));
      return std::nullopt;
    }
    if (!read) {
      reply(res, 400, error_body("bad-request", "the request body could not be read"));
      return std::nullopt;
    }
    return body;
  };
  // The scan settings of a request (its `prior`), or answers the error and gives nothing.
  auto request_settings = [&cfg, reply](const httplib::Request& req,
                                        httplib::Response& res) -> std::optional<ScanSettings> {
    ScanSettings settings = cfg.scan;
    if (!req.has_param("prior")) return settings;
    try {
      const double prior = std::stod(req.get_param_value("prior"));
      if (!(prior > 0.0 && prior < 1.0)) throw std::invalid_argument("range");
      settings.prior = prior;
    } catch (const std::exception&) {
      reply(res, 400, error_body("bad-request", "prior must be a number strictly between 0 and 1"));
      return std::nullopt;
    }
    return settings;
  };
  // Runs `work` on a scoring slot with the model of the moment (the request finishes on it even if
  // another is loaded), or answers 503 when every worker is busy and the queue is full.
  auto on_a_worker = [&s, reply](httplib::Response& res, const std::function<void(const Model&)>& work) {
    if (!s.acquire()) {
      res.set_header("Retry-After", "1");
      reply(res, 503,
            error_body("overloaded", "all scoring workers are busy and the queue is full; retry shortly"));
      return false;
    }
    const auto model = s.current();
    try {
      work(*model);
    } catch (...) {
      s.release();
      throw;
    }
    s.release();
    return true;
  };
  auto upload_name = [](const httplib::Request& req) {
    return req.get_param_value("name").empty() ? std::string("-") : req.get_param_value("name");
  };

  server.Post("/v1/score", [observed, reply, read_upload, request_settings, on_a_worker, upload_name](
                               const httplib::Request& req, httplib::Response& res,
                               const httplib::ContentReader& content_reader) {
    observed("/v1/score", req, res, [&]() -> std::string {
      const auto body = read_upload(req, res, content_reader);
      const auto settings = body ? request_settings(req, res) : std::nullopt;
      Json record;
      if (!settings || !on_a_worker(res, [&](const Model& model) {
            record = scan_bytes(upload_name(req), as_bytes(*body), model, *settings);
          })) {
        return "";
      }
      if (record.contains("error")) {
        reply(res, status_for(record["error"]["code"]), record);
        return "";
      }
      reply(res, 200, record);
      return record["band"];
    });
  });
  server.Post("/v1/explain", [observed, reply, read_upload, request_settings, on_a_worker, upload_name](
                                 const httplib::Request& req, httplib::Response& res,
                                 const httplib::ContentReader& content_reader) {
    observed("/v1/explain", req, res, [&]() -> std::string {
      const auto body = read_upload(req, res, content_reader);
      const auto settings = body ? request_settings(req, res) : std::nullopt;
      std::optional<Result<Explanation>> explained;
      if (!settings || !on_a_worker(res, [&](const Model& model) {
            explained = explain_bytes(upload_name(req), as_bytes(*body), model, *settings);
          })) {
        return "";
      }
      if (!explained->ok()) {
        const Error& e = explained->error();
        const std::string code(error_code_name(e.code));
        reply(res, status_for(code), error_body(code, e.message));
        return "";
      }
      const Explanation& x = **explained;
      Json answer = x.summary;
      answer["pictures"] = {{"preview", png_data_uri(x.pictures.preview)},
                            {"noise_residual", png_data_uri(x.pictures.noise_residual)},
                            {"residual_spectrum", png_data_uri(x.pictures.residual_spectrum)},
                            {"resampling_pmap_spectrum", png_data_uri(x.pictures.pmap_spectrum)},
                            {"contributions_svg", x.pictures.contributions_svg}};
      reply(res, 200, answer);
      return x.summary["band"];
    });
  });
  server.Get("/", [observed](const httplib::Request& req, httplib::Response& res) {
    observed("/", req, res, [&] {
      // Everything the page needs is inline; it may talk only to this service.
      res.set_header("Content-Security-Policy",
                     "default-src 'none'; script-src 'unsafe-inline'; style-src 'unsafe-inline'; "
                     "img-src data: blob:; connect-src 'self'; base-uri 'none'; form-action 'none'; "
                     "frame-ancestors 'none'");
      res.set_header("X-Content-Type-Options", "nosniff");
      res.set_header("Referrer-Policy", "no-referrer");
      res.set_header("Cache-Control", "no-store");
      res.set_content(review_page(), "text/html; charset=utf-8");
      return std::string();
    });
  });
  server.Get("/v1/health", [&s, reply, observed](const httplib::Request& req, httplib::Response& res) {
    observed("/v1/health", req, res, [&] {
      const auto model = s.current();
      reply(res, model ? 200 : 503,
            {{"status", model ? "ok" : "no-model"}, {"model", model ? Json(model->id) : Json()}});
      return std::string();
    });
  });
  server.Get("/v1/model", [&s, reply, observed](const httplib::Request& req, httplib::Response& res) {
    observed("/v1/model", req, res, [&] {
      const auto model = s.current();
      Json j = model_to_json(*model);
      j.erase("scaler");
      j.erase("linear");
      j["advisory"] = kAdvisoryNotice;
      reply(res, 200, j);
      return std::string();
    });
  });
  server.Post("/v1/model/reload", [this, reply, observed](const httplib::Request& req,
                                                          httplib::Response& res) {
    observed("/v1/model/reload", req, res, [&] {
      const auto before = state_->current()->id;
      auto loaded = load_model();
      if (!loaded) {
        reply(res, 422, error_body("model-refused", loaded.error().message + "; still serving " + before));
      } else {
        reply(res, 200, {{"model", *loaded}, {"previous", before}});
      }
      return std::string();
    });
  });
  server.Get("/metrics", [&s, observed](const httplib::Request& req, httplib::Response& res) {
    observed("/metrics", req, res, [&] {
      int waiting = 0;
      int active = 0;
      {
        std::lock_guard lock(s.slots_mutex);
        waiting = s.waiting;
        active = s.active;
      }
      res.set_content(s.metrics.text(waiting, active, s.current()->id, *s.connections),
                      "text/plain; version=0.0.4");
      return std::string();
    });
  });
  server.set_post_routing_handler([](const httplib::Request&, httplib::Response&) { connection_answered(); });
  server.set_error_handler([reply](const httplib::Request&, httplib::Response& res) {
    if (!res.body.empty()) return;  // our own answer
    if (res.status == 413) {
      reply(res, 413, error_body("too-large", "the request body is over the size limit"));
    } else if (res.status == 400) {
      reply(res, 400, error_body("bad-request", "the request could not be read"));
    } else if (res.status == 404) {
      reply(res, 404, error_body("not-found", "no such route; see docs/openapi.yaml"));
    } else {
      reply(res, res.status, error_body("http-" + std::to_string(res.status), "request refused"));
    }
  });

  s.prepared = true;
  return true;
}

}  // namespace residue
