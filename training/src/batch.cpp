#include "residue/training/batch.hpp"

#include <algorithm>
#include <filesystem>

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
      // Folders are descended into; everything else is listed, so that a FIFO, a socket, a device
      // or a broken link gets its own error record instead of vanishing from the batch (read_file
      // refuses what is not a regular file without opening it).
      if (!it->is_directory(ec)) found.push_back(it->path().string());
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
  ordered_parallel<Result<Extraction>>(
      paths.size(), jobs, [&](size_t i) { return extract_file(paths[i], options); },
      [&](size_t i, Result<Extraction>& r) { sink(i, paths[i], r); });
}

}  // namespace residue
