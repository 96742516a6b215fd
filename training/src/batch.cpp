#include "residue/training/batch.hpp"

#include <algorithm>
#include <condition_variable>
#include <filesystem>
#include <map>
#include <mutex>
#include <optional>
#include <thread>

namespace residue {

ExpandedInputs expand_inputs(const std::vector<std::string>& inputs, std::istream& stdin_paths) {
  namespace fs = std::filesystem;
  ExpandedInputs out;
  auto add = [&](const std::string& input) {
    std::error_code ec;
    if (!fs::is_directory(input, ec)) {
      out.files.push_back(input);  // a missing or odd file becomes an error record later
      return;
    }
    std::vector<std::string> found;
    fs::recursive_directory_iterator it(input, fs::directory_options::skip_permission_denied, ec);
    if (ec) {
      out.problems.emplace_back(input, "cannot list folder: " + ec.message());
      return;
    }
    for (; it != fs::recursive_directory_iterator(); it.increment(ec)) {
      if (ec) {
        out.problems.emplace_back(input, "error while listing: " + ec.message());
        break;
      }
      if (it->is_regular_file(ec)) found.push_back(it->path().string());
    }
    std::sort(found.begin(), found.end());
    out.files.insert(out.files.end(), found.begin(), found.end());
  };
  for (const auto& input : inputs) {
    if (input == "-") {
      std::string line;
      while (std::getline(stdin_paths, line)) {
        if (!line.empty()) add(line);
      }
    } else {
      add(input);
    }
  }
  return out;
}

void extract_batch(const std::vector<std::string>& paths, const ExtractOptions& options, int jobs,
                   const BatchSink& sink) {
  jobs = std::max(1, jobs);
  const size_t ahead = static_cast<size_t>(jobs) * 4;  // results allowed to wait for their turn
  std::mutex mutex;
  std::condition_variable cv;
  size_t next_index = 0;  // next path to start
  size_t next_emit = 0;   // next result to hand to the sink
  std::map<size_t, Result<Extraction>> ready;

  auto worker = [&] {
    while (true) {
      size_t index = 0;
      {
        std::unique_lock lock(mutex);
        cv.wait(lock, [&] { return next_index >= paths.size() || next_index < next_emit + ahead; });
        if (next_index >= paths.size()) return;
        index = next_index++;
      }
      Result<Extraction> result = extract_file(paths[index], options);
      std::unique_lock lock(mutex);
      ready.emplace(index, std::move(result));
      // Whoever holds the next result in order hands over every consecutive ready result.
      while (!ready.empty() && ready.begin()->first == next_emit) {
        auto node = ready.extract(ready.begin());
        sink(node.key(), paths[node.key()], node.mapped());
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
