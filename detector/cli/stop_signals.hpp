// SIGINT and SIGTERM taken by one thread, which calls a stop function once; for long-running
// commands (serve, worker) that must finish in-flight work before leaving.
#pragma once

#include <pthread.h>

#include <atomic>
#include <csignal>
#include <functional>
#include <thread>

namespace residue::cli {

class StopOnSignals {
 public:
  // Blocks SIGINT and SIGTERM in the calling thread (and threads started after it).
  explicit StopOnSignals(std::function<void()> on_stop) {
    sigemptyset(&signals_);
    sigaddset(&signals_, SIGINT);
    sigaddset(&signals_, SIGTERM);
    pthread_sigmask(SIG_BLOCK, &signals_, nullptr);
    waiter_ = std::thread([this, on_stop = std::move(on_stop)] {
      int signal = 0;
      sigwait(&signals_, &signal);
      if (!finished_) on_stop();
    });
  }
  // Wakes the waiting thread when the command ended by itself.
  ~StopOnSignals() {
    finished_ = true;
    pthread_kill(waiter_.native_handle(), SIGTERM);
    waiter_.join();
  }
  StopOnSignals(const StopOnSignals&) = delete;
  StopOnSignals& operator=(const StopOnSignals&) = delete;

 private:
  sigset_t signals_{};
  std::atomic<bool> finished_{false};
  std::thread waiter_;
};

}  // namespace residue::cli
