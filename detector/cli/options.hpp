// Command-line flags for the settings structs shared by several subcommands.
#pragma once

#include <CLI/CLI.hpp>
#include <fstream>
#include <optional>
#include <string>

#include "residue/detector/scoring/scan.hpp"
#include "residue/features/extract.hpp"
#include "residue/features/window_threads.hpp"

namespace residue::cli {

// Registers --max-pixels, --max-file-mb and --min-window on `command`, bound to `options`.
inline void add_extract_options(CLI::App& command, ExtractOptions& options) {
  command
      .add_option("--max-pixels", options.limits.max_pixels,
                  "refuse images whose header declares more pixels than this")
      ->capture_default_str();
  command
      .add_option_function<double>(
          "--max-file-mb",
          [&options](double mb) {
            options.limits.max_file_bytes = static_cast<std::uint64_t>(mb * 1048576.0);
          },
          "refuse files larger than this many MiB (default 200: with the decoders reading window by window, "
          "peak memory is about 70 MB plus the file)")
      ->check(CLI::PositiveNumber);
  command
      .add_option("--min-window", options.windows.min_size,
                  "smallest analysis window in px (power of two, 32..256); smaller images are refused")
      ->check(CLI::IsMember({32, 64, 128, 256}))
      ->capture_default_str();
}

// Registers --window-threads (one image's windows on idle cores: window_threads.hpp), defaulting
// to every core, for the commands that score one image at a time (serve, explain).
inline void add_window_threads_option(CLI::App& command, ExtractOptions& options) {
  options.window_threads = available_cores();
  command
      .add_option("--window-threads", options.window_threads,
                  "threads one image's analysis windows may use while cores are idle (under load each image "
                  "keeps to one; 1: never split; default: cores)")
      ->check(CLI::Range(1, 256));
}

// Registers --with-features and --copies (records that carry their feature vectors: carried.hpp).
inline void add_carry_options(CLI::App& command, ScanSettings& settings) {
  auto* with = command.add_flag(
      "--with-features", settings.with_features,
      "add the feature vector to each record (with the extractor version, schema and the file "
      "facts training needs), so that verdicts and training can use it without the image");
  command
      .add_option_function<std::string>(
          "--copies", [&settings](const std::string& level) { settings.copies = *parse_augment(level); },
          "with --with-features: also carry the augmented copies train --augment makes (none, light or full; "
          "needed to train from the records with that --augment)")
      ->check(CLI::IsMember({"none", "light", "full"}))
      ->default_str("none")
      ->needs(with);
}

// The first line of a secret file (a bearer token, a Redis password), without a trailing CR; empty
// when the file cannot be read or its first line is empty.
inline std::string first_line_of(const std::string& path) {
  std::ifstream in(path);
  std::string line;
  std::getline(in, line);
  if (!line.empty() && line.back() == '\r') line.pop_back();
  return line;
}

}  // namespace residue::cli
