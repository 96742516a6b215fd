// The HTTP service's lifecycle: settings checked, access log opened, model loaded, connections
// and routes set up (handlers.cpp), bind and listen, reload on SIGHUP, stop. cpp-httplib stays
// inside this folder (request_server.hpp, routes, uploads, handlers, connection_guard).
#include "residue/detector/service/service.hpp"

#include <chrono>
#include <csignal>
#include <thread>

#include "handlers.hpp"
#include "service_state.hpp"

namespace residue {

namespace {

std::atomic<bool> g_reload_requested{false};
extern "C" void on_sighup(int /*signal*/) { g_reload_requested = true; }

}  // namespace

bool is_loopback(const std::string& host) {
  return host == "localhost" || host == "::1" || host.rfind("127.", 0) == 0;
}

Service::Service(ServiceSettings settings, std::string model_path)
    : state_(std::make_unique<ServiceState>()) {
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
  ServiceState& s = *state_;
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
  ServiceState& s = *state_;
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
  if (!cfg.verdicts.empty()) {
    auto store = VerdictStore::open(cfg.verdicts);
    if (!store) return store.error();
    s.verdicts = std::move(*store);
    s.memory = std::make_unique<VectorMemory>(cfg.remember);
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
  // A response goes out in more than one write (head, then body). With Nagle's algorithm the later
  // write waits for the client to acknowledge the first, and clients delay that acknowledgement
  // (40 ms on Linux): measured, a 1 MP image scored in 47 ms reached wrk after 88 ms.
  server.set_tcp_nodelay(true);

  add_handlers(s, [this] { return load_model(); });

  s.prepared = true;
  return true;
}

}  // namespace residue
