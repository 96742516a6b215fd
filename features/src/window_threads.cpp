// Idle helper threads for one image's windows (window_threads.hpp).
#include "residue/features/window_threads.hpp"

#include <algorithm>
#include <atomic>
#include <condition_variable>
#include <deque>
#include <exception>
#include <memory>
#include <mutex>
#include <thread>
#include <vector>

namespace residue {

namespace {

struct Job {
  const std::function<void(size_t)>* work = nullptr;  // alive until every claimed index is done
  size_t count = 0;
  int max_threads = 1;
  int threads = 1;  // the caller and the helpers that joined; guarded by the pool's mutex
  std::atomic<size_t> next{0};
  std::mutex done_mutex;
  std::condition_variable done_cv;
  size_t finished = 0;  // guarded by done_mutex
  std::exception_ptr error;

  // Claims indices until none is left; returns when this thread has no more to do.
  void run() {
    while (true) {
      const size_t i = next.fetch_add(1);
      if (i >= count) return;
      std::exception_ptr failed;
      try {
        (*work)(i);
      } catch (...) {
        failed = std::current_exception();
      }
      std::lock_guard lock(done_mutex);
      if (failed && !error) error = failed;
      if (++finished == count) done_cv.notify_all();
    }
  }
  [[nodiscard]] bool exhausted() const { return next.load() >= count; }
};

class HelperPool {
 public:
  HelperPool() : cores_(static_cast<int>(std::max(1U, std::thread::hardware_concurrency()))) {}
  ~HelperPool() {
    {
      std::lock_guard lock(mutex_);
      stopping_ = true;
    }
    wake_.notify_all();
    for (auto& t : helpers_) t.join();
  }
  HelperPool(const HelperPool&) = delete;
  HelperPool& operator=(const HelperPool&) = delete;

  [[nodiscard]] int cores() const { return cores_; }

  void run(size_t count, int max_threads, const std::function<void(size_t)>& work) {
    // Callers at work, this one included: with as many as there are cores, no helper is idle in
    // any useful sense, and the caller works alone.
    const int callers = callers_.fetch_add(1) + 1;
    struct Leave {
      std::atomic<int>& n;
      ~Leave() { n.fetch_sub(1); }
    } leave{callers_};
    if (callers >= cores_) {  // also a one-core machine: no helper exists
      for (size_t i = 0; i < count; ++i) work(i);
      return;
    }
    auto job = std::make_shared<Job>();
    job->work = &work;
    job->count = count;
    job->max_threads = max_threads;
    {
      std::lock_guard lock(mutex_);
      start_helpers();
      jobs_.push_back(job);
    }
    wake_.notify_all();
    job->run();
    {
      std::lock_guard lock(mutex_);
      std::erase(jobs_, job);
    }
    std::unique_lock done(job->done_mutex);
    job->done_cv.wait(done, [&] { return job->finished == job->count; });
    if (job->error) std::rethrow_exception(job->error);
  }

 private:
  void start_helpers() {  // under mutex_
    if (!helpers_.empty()) return;
    for (int k = 0; k + 1 < cores_; ++k) helpers_.emplace_back([this] { help(); });
  }

  void help() {
    std::unique_lock lock(mutex_);
    while (true) {
      wake_.wait(lock, [&] { return stopping_ || !jobs_.empty(); });
      if (stopping_) return;
      std::shared_ptr<Job> job = jobs_.front();
      // A job stays on offer while it has indices left and room for another thread.
      if (job->exhausted() || ++job->threads >= job->max_threads) jobs_.pop_front();
      if (job->exhausted()) continue;
      lock.unlock();
      job->run();
      lock.lock();
    }
  }

  const int cores_;
  std::atomic<int> callers_{0};
  std::mutex mutex_;
  std::condition_variable wake_;
  std::deque<std::shared_ptr<Job>> jobs_;
  std::vector<std::thread> helpers_;
  bool stopping_ = false;
};

HelperPool& pool() {
  static HelperPool p;
  return p;
}

}  // namespace

int available_cores() { return pool().cores(); }

void parallel_indices(size_t count, int max_threads, const std::function<void(size_t)>& work) {
  if (max_threads <= 1 || count <= 1) {
    for (size_t i = 0; i < count; ++i) work(i);
    return;
  }
  pool().run(count, max_threads, work);
}

}  // namespace residue
