#include "dataset_options.hpp"

#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <iostream>
#include <thread>

#include "options.hpp"
#include "progress.hpp"

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
  command.add_option("-j,--jobs", args.jobs, "threads for extraction, and for the cross-validation folds of training (default: cores)")
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
  PreparedDataset out{std::move(*dataset), {}, jobs};
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
