// Batch extraction: expands inputs into files and extracts features on a pool of threads,
// handing results back in input order with bounded memory, whatever the batch size.
#pragma once

#include <functional>
#include <istream>
#include <string>
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

using BatchSink =
    std::function<void(size_t index, const std::string& path, const Result<Extraction>& result)>;

// Extracts every path with `jobs` threads (>= 1). `sink` is called once per path, in input order,
// from one thread at a time. At most a few results per thread wait in memory.
void extract_batch(const std::vector<std::string>& paths, const ExtractOptions& options, int jobs,
                   const BatchSink& sink);

}  // namespace residue
