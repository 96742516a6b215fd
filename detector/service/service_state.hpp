// What the service holds while it runs, shared by its lifecycle (service.cpp) and its route
// handlers (handlers.cpp): the settings, the model of the moment, admission to scoring (workers and
// a waiting queue), the access log and the metrics.
#pragma once

#include <atomic>
#include <condition_variable>
#include <fstream>
#include <functional>
#include <memory>
#include <mutex>
#include <string>
#include <thread>

#include "connection_guard.hpp"
#include "metrics.hpp"
#include "request_server.hpp"
#include "residue/detector/service/service.hpp"
#include "residue/training/verdicts.hpp"
#include "routes.hpp"
#include "vector_memory.hpp"

namespace residue {

struct ServiceState {
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
  // With --verdicts: the store, and the vectors of the images scored last (for verdicts by hash).
  std::unique_ptr<VerdictStore> verdicts;
  std::unique_ptr<VectorMemory> memory;

  std::shared_ptr<const Model> current() {
    std::lock_guard lock(model_mutex);
    return model;
  }
  // One JSON line to the access log (stderr when there is none, or once the log cannot grow).
  void log(const Json& line);
  // Waits for a scoring slot; false when the waiting queue is full (the caller answers 503).
  bool acquire();
  void release();
  [[nodiscard]] bool authorised(const httplib::Request& req) const;
  // Every request gets an id, a log line and a metrics observation; `body` answers it and returns
  // the band it scored, if any.
  void observe(const char* route, const httplib::Request& req, httplib::Response& res,
               const std::function<std::string()>& body);
  // Runs `work` on a scoring slot with the model of the moment (the request finishes on it even if
  // another is loaded), or answers 503 when every worker is busy and the queue is full.
  bool on_a_worker(httplib::Response& res, const std::function<void(const Model&)>& work);
};

}  // namespace residue
