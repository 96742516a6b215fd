// Scoring files with a model into the record contract of ../shared/BRIEF.md ("Contracts"):
// path, sha256, width, height, format, p_generated, band, margin, contributions, declared, model,
// advisory; on failure error {code, message} instead of a score. Thread-safe.
#pragma once

#include <nlohmann/json.hpp>
#include <optional>
#include <span>
#include <string>

#include "residue/features/metadata.hpp"
#include "residue/training/augment.hpp"
#include "residue/training/model.hpp"

namespace residue {

struct ScanSettings {
  ExtractOptions extract;
  std::optional<double> prior;             // deployment share of generated images
  std::optional<double> likely_generated;  // overrides the model's threshold
  std::optional<double> likely_camera;     // overrides the model's threshold
  // Adds "features" to the record (carried.hpp): the vector, the facts training needs, the
  // extractor version and schema, and the augmented copies at `copies` (made and extracted here).
  bool with_features = false;
  Augment copies = Augment::kNone;
};

// The model with the settings' threshold overrides applied.
Thresholds effective_thresholds(const Model& model, const ScanSettings& settings);

// Scores one file (read, hashed, decoded, extracted, scored, metadata read).
nlohmann::ordered_json scan_file(const std::string& path, const Model& model, const ScanSettings& settings);

// Scores bytes already in memory (the HTTP service); `path` is only echoed.
nlohmann::ordered_json scan_bytes(const std::string& path, std::span<const std::uint8_t> bytes,
                                  const Model& model, const ScanSettings& settings);

// What the metadata declares, or null when it declares nothing.
nlohmann::ordered_json declared_json(const DeclaredMetadata& metadata);

}  // namespace residue
