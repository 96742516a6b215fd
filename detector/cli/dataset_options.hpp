// Shared by train, audit and evaluate: where the feature cache lives, threads, the progress bar,
// and turning a labelled folder (or manifest) into prepared items.
#pragma once

#include <CLI/CLI.hpp>
#include <memory>
#include <string>

#include "residue/training/cache.hpp"
#include "residue/training/groups.hpp"
#include "residue/training/prepare.hpp"

namespace residue::cli {

struct DatasetArgs {
  std::string root;        // ROOT folder or CSV manifest
  std::string cache_path;  // empty: the default location
  bool no_cache = false;
  int jobs = 0;  // 0: one per core
  ExtractOptions extract;
  Augment augment = Augment::kNone;  // train sets it: processed copies of every file too
};

// Registers ROOT plus --cache, --no-cache, --jobs and the extraction limits.
void add_dataset_options(CLI::App& command, DatasetArgs& args, const std::string& root_help);

// Loads the dataset and prepares it (cache, parallel extraction, progress bar on a terminal).
// Prints a one-line summary and the unreadable files to stderr. Returns nullopt after printing
// the error when the dataset itself cannot be read.
struct PreparedDataset {
  Dataset dataset;
  PrepareReport report;
  int jobs = 1;
  Augment augment = Augment::kNone;  // the copies level the items come with
  // Wall-clock seconds the cache hits would have cost on these threads.
  [[nodiscard]] double seconds_saved() const { return report.cached_extract_seconds / jobs; }
};
std::optional<PreparedDataset> prepare_from_args(const DatasetArgs& args, const char* command);

// The same from records carrying their features (scan or worker --with-features, collect): labels
// from `labels` (a folder or manifest, matched by path) or from the records. Without
// `augment_given`, the copies level is lowered to what the records carry (and said).
std::optional<PreparedDataset> prepare_from_records(const std::vector<std::string>& files,
                                                    const std::string& labels, Augment augment,
                                                    bool augment_given, const char* command);

// --group-by: what belongs together (duplicates, folder, manifest), for train's folds and compare's
// bootstrap.
void add_group_by_option(CLI::App& command, std::string& group_by, const std::string& what);
GroupBy parse_group_by(const std::string& s);

// The default cache file: $XDG_CACHE_HOME/residue/features.sqlite or ~/.cache/residue/...
std::string default_cache_path();

}  // namespace residue::cli
