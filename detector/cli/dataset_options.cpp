#include "dataset_options.hpp"

#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <iostream>
#include <thread>

#include "options.hpp"
#include "progress.hpp"
#include "residue/training/carried.hpp"

namespace residue::cli {

std::string default_cache_path() {
  std::filesystem::path base;
  if (const char* xdg = std::getenv("XDG_CACHE_HOME"); xdg != nullptr && *xdg != '\0') {
    base = xdg;
  } else if (const char* home = std::getenv("HOME"); home != nullptr && *home != '\0') {
    base = std::filesystem::path(home) / ".cache";
  } else {
    base = std::filesystem::temp_directory_path();
  }
  return (base / "residue" / "features.sqlite").string();
}

void add_dataset_options(CLI::App& command, DatasetArgs& args, const std::string& root_help) {
  command.add_option("root", args.root, root_help)->required();
  command.add_option("--cache", args.cache_path,
                     "feature cache file (SQLite; default " + default_cache_path() + ")");
  command.add_flag("--no-cache", args.no_cache, "extract every file again and store nothing");
  command
      .add_option("-j,--jobs", args.jobs,
                  "threads for extraction, and for the cross-validation folds of training (default: cores)")
      ->check(CLI::Range(1, 256));
  add_extract_options(command, args.extract);
}

std::optional<PreparedDataset> prepare_from_args(const DatasetArgs& args, const char* command) {
  auto dataset = load_dataset(args.root);
  if (!dataset) {
    std::cerr << "residue " << command << ": " << dataset.error().message << "\n";
    return std::nullopt;
  }
  std::unique_ptr<FeatureCache> cache;
  if (!args.no_cache) {
    const std::string path = args.cache_path.empty() ? default_cache_path() : args.cache_path;
    std::error_code ec;
    std::filesystem::create_directories(std::filesystem::path(path).parent_path(), ec);
    auto opened = FeatureCache::open(path);
    if (opened) {
      cache = std::move(*opened);
    } else {
      std::cerr << "residue " << command << ": " << opened.error().message
                << " (continuing without a cache)\n";
    }
  }
  const Progress bar("images");
  const ProgressFn progress = [&bar](size_t done, size_t total) { bar.update(done, total); };
  const int jobs =
      args.jobs > 0 ? args.jobs : static_cast<int>(std::max(1U, std::thread::hardware_concurrency()));
  PreparedDataset out{std::move(*dataset), {}, jobs, args.augment};
  out.report = prepare_dataset(out.dataset, args.extract, cache.get(), jobs, progress, args.augment);
  std::cerr << "residue " << command << ": " << out.report.items.size() << " images ready ("
            << out.report.extracted << " extracted, " << out.report.cached << " from the feature cache";
  if (args.augment != Augment::kNone) {
    std::cerr << "; " << out.report.copies.size() << " augmented copies (" << augment_name(args.augment)
              << ", " << out.report.copies_extracted << " extracted";
    if (out.report.copies_failed > 0) std::cerr << ", " << out.report.copies_failed << " could not be made";
    std::cerr << ")";
  }
  std::cerr << ") in " << static_cast<int>(out.report.seconds * 10) / 10.0 << " s";
  if (out.report.cached > 0 && out.report.cached_extract_seconds > 0) {
    std::cerr << "; the cache saved about " << static_cast<int>(out.seconds_saved() * 10) / 10.0 << " s";
  }
  if (!out.report.failed.empty() || !out.dataset.skipped.empty()) {
    std::cerr << "; " << out.report.failed.size() + out.dataset.skipped.size() << " skipped:";
  }
  std::cerr << "\n";
  if (cache && cache->failed_writes() > 0) {
    std::cerr << "residue " << command << ": " << cache->failed_writes()
              << " vectors could not be stored in the feature cache (" << cache->first_write_failure()
              << "); they were used, but will be extracted again next time\n";
  }
  for (const auto& [path, reason] : out.dataset.skipped)
    std::cerr << "  skipped " << path << ": " << reason << "\n";
  for (const auto& [file, error] : out.report.failed) {
    std::cerr << "  skipped " << file.path << ": " << error_code_name(error.code) << ": " << error.message
              << "\n";
  }
  return out;
}

std::optional<PreparedDataset> prepare_from_records(const std::vector<std::string>& files,
                                                    const std::string& labels, Augment augment,
                                                    bool augment_given, const char* command) {
  PreparedDataset out;
  if (!labels.empty()) {
    auto dataset = load_dataset(labels);
    if (!dataset) {
      std::cerr << "residue " << command << ": --labels: " << dataset.error().message << "\n";
      return std::nullopt;
    }
    out.dataset = std::move(*dataset);
  }
  const auto start = std::chrono::steady_clock::now();
  const std::vector<std::filesystem::path> paths(files.begin(), files.end());
  auto loaded =
      load_records_for_training(paths, labels.empty() ? nullptr : &out.dataset, augment, !augment_given);
  if (!loaded) {
    std::cerr << "residue " << command << ": " << loaded.error().message << "\n";
    return std::nullopt;
  }
  out.report.items = std::move(loaded->items);
  out.report.copies = std::move(loaded->copies);
  out.report.cached = out.report.items.size();
  out.report.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  out.augment = loaded->augment;
  std::cerr << "residue " << command << ": " << out.report.items.size() << " images ready from "
            << loaded->records << " records in " << files.size() << " file" << (files.size() == 1 ? "" : "s");
  if (loaded->augment != Augment::kNone)
    std::cerr << "; " << out.report.copies.size() << " augmented copies (" << augment_name(loaded->augment)
              << ")";
  if (!augment_given && loaded->augment != augment) {
    std::cerr << "; the records carry "
              << (loaded->augment == Augment::kNone ? std::string("no augmented copies")
                                                    : augment_name(loaded->augment) + " copies only")
              << ", so --augment " << augment_name(loaded->augment) << " is used (extract with --copies "
              << augment_name(augment) << " to train with them)";
  }
  if (loaded->missing > 0) std::cerr << "; " << loaded->missing << " labelled files have no usable record";
  if (!loaded->skipped.empty()) std::cerr << "; " << loaded->skipped.size() << " records skipped:";
  std::cerr << "\n";
  size_t shown = 0;
  for (const auto& [path, reason] : loaded->skipped) {
    if (++shown > 20) {
      std::cerr << "  ... and " << loaded->skipped.size() - 20 << " more\n";
      break;
    }
    std::cerr << "  skipped " << path << ": " << reason << "\n";
  }
  return out;
}

void add_group_by_option(CLI::App& command, std::string& group_by, const std::string& what) {
  command
      .add_option("--group-by", group_by, what + ": duplicates, folder (+duplicates), manifest (+duplicates)")
      ->check(CLI::IsMember({"duplicates", "folder", "manifest"}))
      ->capture_default_str();
}

GroupBy parse_group_by(const std::string& s) {
  if (s == "folder") return GroupBy::kFolder;
  if (s == "manifest") return GroupBy::kManifest;
  return GroupBy::kDuplicates;
}

}  // namespace residue::cli
