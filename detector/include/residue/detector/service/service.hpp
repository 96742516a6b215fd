// The moderation-queue service: HTTP over cpp-httplib, a fixed pool of scoring workers behind a
// bounded waiting queue, atomic model reload. Routes (docs/openapi.yaml):
//   POST /v1/score          image bytes (or a multipart form with one file) -> the scan record
//   GET  /v1/health         liveness and readiness
//   GET  /v1/model          model id, schema, thresholds, provenance
//   POST /v1/verdicts       a reviewer's verdict on an image scored before (by SHA-256) or sent along
//   POST /v1/model/reload   load the model file again (also on SIGHUP); a bad file is refused
//   GET  /metrics           Prometheus text exposition format
// Threading: each connection has its own thread (at most `max_connections`; a head or body sent
// too slowly is cut, connection_guard.hpp); at most `workers` score at once, at most `queue` more
// wait, the rest get 503 with Retry-After at once. The model is swapped under a lock
// as a shared pointer, so requests in flight finish on the model they started with.
#pragma once

#include <memory>
#include <string>
#include <string_view>

#include "residue/detector/scoring/scan.hpp"

namespace residue {

struct ServiceSettings {
  std::string host = "127.0.0.1";
  int port = 8080;
  int workers = 0;                         // scoring threads; 0: one per core
  int queue = 32;                          // requests allowed to wait for a worker
  std::size_t max_body_bytes = 50u << 20;  // 413 above
  int timeout_seconds = 30;                // one read or write on a connection
  int max_connections = 256;               // open at once; beyond, 503 and closed
  int header_timeout_seconds = 10;         // to send a request's head (from connecting or the last answer)
  int body_timeout_seconds = 120;          // to send a request's body (from its head)
  std::string token;                       // bearer token; empty: no authentication
  bool allow_unauthenticated = false;      // needed to bind a non-loopback address without a token
  std::string access_log;                  // file for the JSON access log; empty: stderr
  std::string verdicts;         // verdict store (verdicts.hpp); empty: POST /v1/verdicts answers 501
  std::size_t remember = 2000;  // with verdicts: vectors of the last images scored, kept for them
  ScanSettings scan;            // limits, prior and threshold overrides
};

struct ServiceState;  // what a running service holds (detector/service/service_state.hpp)

class Service {
 public:
  Service(ServiceSettings settings, std::string model_path);
  ~Service();
  Service(const Service&) = delete;
  Service& operator=(const Service&) = delete;

  // Loads (or reloads) the model file; on failure the current model stays.
  Result<std::string> load_model();
  // Binds and serves until stop(); returns an error when it cannot start.
  Result<bool> run();
  // Answers one HTTP/1.1 request given as bytes (request line, headers, body), without a socket:
  // the response's bytes, or empty when the service cannot start. For the fuzz target; everything
  // but the socket is the same as under run().
  std::string respond(std::string_view request);
  void stop();
  // The port actually bound (useful with port 0).
  [[nodiscard]] int port() const;

 private:
  // Checks the settings, opens the access log, loads the model and sets up the routes, once.
  Result<bool> prepare();
  std::unique_ptr<ServiceState> state_;
};

// Whether `host` is a loopback address (127.0.0.0/8, ::1, localhost).
bool is_loopback(const std::string& host);

}  // namespace residue
