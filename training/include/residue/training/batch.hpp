// Batch extraction: expands inputs into files and extracts features on a pool of threads,
// handing results back in input order with bounded memory, whatever the batch size.
#pragma once

#include <algorithm>
#include <condition_variable>
#include <functional>
#include <istream>
#include <map>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include "residue/features/extract.hpp"

namespace residue {

// Files named directly are kept as given; folders are walked recursively (regular files only,
// sorted by path); "-" reads one path per line from `stdin_paths`. Unreadable folders are
// returned in `problems` as (path, message) and skipped.
struct ExpandedInputs {
  std::vector<std::string> files;
  std::vector<std::pair<std::string, std::string>> problems;
};
ExpandedInputs expand_inputs(const std::vector<std::string>& inputs, std::istream& stdin_paths);

// Runs work(i) for i in [0, n) on `jobs` threads and hands each result to sink(i, result) in
// index order, from one thread at a time. At most 4 results per thread wait for their turn, so
// memory stays bounded whatever n is.
template <typename R>
void ordered_parallel(size_t n, int jobs, const std::function<R(size_t)>& work,
                      const std::function<void(size_t, R&)>& sink);

using BatchSink =
    std::function<void(size_t index, const std::string& path, const Result<Extraction>& result)>;

// Extracts every path with `jobs` threads (>= 1). `sink` is called once per path, in input order,
// from one thread at a time. At most a few results per thread wait in memory.
void extract_batch(const std::vector<std::string>& paths, const ExtractOptions& options, int jobs,
                   const BatchSink& sink);

template <typename R>
void ordered_parallel(size_t n, int jobs, const std::function<R(size_t)>& work,
                      const std::function<void(size_t, R&)>& sink) {
  jobs = std::max(1, jobs);
  const size_t ahead = static_cast<size_t>(jobs) * 4;
  std::mutex mutex;
  std::condition_variable cv;
  size_t next_index = 0;
  size_t next_emit = 0;
  std::map<size_t, R> ready;
  auto worker = [&] {
    while (true) {
      size_t index = 0;
      {
        std::unique_lock lock(mutex);
        cv.wait(lock, [&] { return next_index >= n || next_index < next_emit + ahead; });
        if (next_index >= n) return;
        index = next_index++;
      }
      R result = work(index);
      std::unique_lock lock(mutex);
      ready.emplace(index, std::move(result));
      // Whoever completes the next result in order hands over every consecutive ready one.
      while (!ready.empty() && ready.begin()->first == next_emit) {
        auto node = ready.extract(ready.begin());
        sink(node.key(), node.mapped());
        ++next_emit;
      }
      cv.notify_all();
    }
  };
  std::vector<std::thread> threads;
  threads.reserve(static_cast<size_t>(jobs));
  for (int j = 0; j < jobs; ++j) threads.emplace_back(worker);
  for (auto& t : threads) t.join();
}

}  // namespace residue
