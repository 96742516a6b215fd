// The feature pipeline: file -> guarded decode -> windows -> six families -> named vector.
//
// Basic use:
//   residue::ExtractOptions options;                       // defaults shared by CLI and service
//   auto result = residue::extract_file("photo.jpg", options);
//   if (!result) std::cerr << residue::error_code_name(result.error().code) << ": "
//                          << result.error().message;
//   else for (size_t i = 0; i < result->features.values.size(); ++i)
//     std::cout << residue::feature_names()[i] << " " << result->features.values[i] << "\n";
// Thread safety: every function may be called from many threads at once.
#pragma once

#include <filesystem>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "residue/features/compression.hpp"
#include "residue/features/decode.hpp"
#include "residue/features/processing.hpp"

namespace residue {

// Bump when any value's definition changes; models record it and refuse a mismatch.
inline constexpr std::string_view kExtractorVersion = "3.0.0";

// Names of the learned values, in vector order (`family.group.name[.mean|.max]`).
const std::vector<std::string>& feature_names();
// Short fingerprint of extractor version and names (FNV-1a, hex): equal schemas, equal ids.
const std::string& feature_schema_id();
// The family ("spectral", "noise", "resampling", "sensor", "texture", "coding", "surprise") of each
// value.
const std::vector<std::string>& feature_families();

struct FeatureVector {
  std::vector<double> values;  // aligned with feature_names(): the image's windows pooled
  // Each analysis window's own vector in the same layout (a ".peak" value fills both its mean and
  // max slots), for window-level learning and scoring. May be empty (vectors made elsewhere).
  std::vector<std::vector<double>> windows;
};

struct ExtractOptions {
  DecodeLimits limits;
  WindowPolicy windows;
  bool skip_unused_rows = true;  // JPEG: decode only the rows the windows need
  // Threads one image's windows may use (window_threads.hpp: idle cores only). 1 for batches,
  // which keep every core busy with whole images; the service and `explain` give the cores.
  int window_threads = 1;
};

struct FamilyTimings {
  double decode_ms = 0;
  double spectral_ms = 0;
  double noise_ms = 0;
  double resampling_ms = 0;
  double sensor_ms = 0;
  double texture_ms = 0;
  double coding_ms = 0;
  double surprise_ms = 0;
  double processing_ms = 0;  // processing evidence (not a family: reported, never learned)
  double total_ms = 0;
};

struct Extraction {
  ImageHeader header;
  int channels = 0;
  bool alpha_dropped = false;
  WindowLayout layout;
  std::uint64_t decoded_rows = 0;
  FeatureVector features;
  CompressionHistory compression;
  ProcessingEvidence processing;
  FamilyTimings timings;
};

// Features of tiles already in memory (all the same size), with per-family timings.
// `threads`: as ExtractOptions::window_threads; the vector is the same for any number.
FeatureVector extract_tiles(const std::vector<Tile>& tiles, FamilyTimings* timings = nullptr,
                            double* grid_strength = nullptr, int threads = 1);
// The same for windows made by window_inputs(), which keep what the processing evidence reuses.
FeatureVector extract_windows(const std::vector<WindowInput>& windows, FamilyTimings* timings = nullptr,
                              double* grid_strength = nullptr, int threads = 1);

Result<Extraction> extract_bytes(std::span<const std::uint8_t> bytes, const ExtractOptions& options = {});
Result<Extraction> extract_file(const std::filesystem::path& path, const ExtractOptions& options = {});
// For images made in memory (tests, the demo's simulations): plan, cut, extract.
Result<Extraction> extract_image(const Image& image, const ExtractOptions& options = {});

}  // namespace residue
