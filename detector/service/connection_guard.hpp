// Connections of the HTTP service: one thread each, a cap on how many are open, and deadlines for
// reading a request's head and body, so that slow or idle clients (slowloris) can neither take
// every thread nor hold one for ever.
//
// The HTTP library (cpp-httplib 0.11) reads a request on a blocking socket, one thread per
// connection, with only a per-read timeout: a client sending one byte every few seconds keeps its
// thread as long as it likes. The library hands each accepted connection to a task queue as a
// closure that hides the socket; this queue finds the socket the library has just accepted (the
// one of the service's port not yet known), starts a thread for it, and a watchdog shuts the
// socket down (shutdown(2), never close: the library owns the descriptor) when its current phase
// runs past its deadline. The service's handlers say which phase a connection is in.
#pragma once

#include <httplib.h>

#include <atomic>
#include <chrono>
#include <condition_variable>
#include <map>
#include <memory>
#include <mutex>
#include <string>
#include <thread>

namespace residue {

struct ConnectionLimits {
  int port = 0;                                     // the service's bound port
  int max_connections = 256;                        // open at once; beyond, 503 and closed
  std::chrono::milliseconds header_timeout{10000};  // from connecting (or the last answer) to a whole head
  std::chrono::milliseconds body_timeout{120000};   // from the head to the whole body
  std::string refusal;                              // the whole HTTP answer sent over the cap
};

struct ConnectionCounts {
  std::atomic<long long> open{0};
  std::atomic<unsigned long long> refused{0};        // over the cap
  std::atomic<unsigned long long> head_timeouts{0};  // cut while reading a head (or idle)
  std::atomic<unsigned long long> body_timeouts{0};  // cut while reading a body
};

// What a connection is doing, told by the service from the connection's own thread. Calls from a
// thread that serves no socket (Service::respond) do nothing.
void connection_reading_body();  // the head is in: the body deadline starts
void connection_working();       // the request is read: no deadline while it is answered
void connection_answered();      // the answer is being written: the next head's deadline starts

class ConnectionGuard : public httplib::TaskQueue {
 public:
  ConnectionGuard(ConnectionLimits limits, std::shared_ptr<ConnectionCounts> counts);
  ~ConnectionGuard() override;
  ConnectionGuard(const ConnectionGuard&) = delete;
  ConnectionGuard& operator=(const ConnectionGuard&) = delete;

  void enqueue(std::function<void()> fn) override;
  void shutdown() override;  // waits for every connection to finish

  struct Connection;

 private:
  void watch();
  int find_new_socket(std::string& peer);

  ConnectionLimits limits_;
  std::shared_ptr<ConnectionCounts> counts_;
  std::mutex mutex_;
  std::condition_variable changed_;
  std::map<std::pair<int, std::string>, std::shared_ptr<Connection>> open_;  // (socket, peer)
  bool stopping_ = false;
  int threads_ = 0;  // connection threads still running
  std::thread watchdog_;
};

}  // namespace residue
