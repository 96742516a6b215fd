// Why one image scored as it did: pictures a person can look at and a short summary.
#pragma once

#include <cstdint>
#include <filesystem>
#include <nlohmann/json.hpp>
#include <span>
#include <string>

#include "residue/detector/scoring/scan.hpp"
#include "residue/features/image.hpp"

namespace residue {

// The pictures of an explanation, in memory.
struct ExplanationPictures {
  Image preview;                  // the image reduced to at most 512 px on its longer side
  Image noise_residual;           // centre of the image, up to 1024 px
  Image residual_spectrum;        // log power spectrum of the middle window's residual, N/8 grid marked
  Image pmap_spectrum;            // Kirchner (2008) p-map spectrum of the middle window
  // Per-pixel coding surprise of the middle window under the model's camera pixel model
  // (surprise.hpp): red where pixels cost more to code than camera photos' in the same context,
  // blue where less (too smooth); empty when the model has no camera pixel model.
  Image surprise_map;
  std::string contributions_svg;  // per-family bar chart
};

struct Explanation {
  nlohmann::ordered_json summary;  // the scan record plus thresholds and strongest_evidence
  std::string text;                // the same for a person, with the advisory notice
  ExplanationPictures pictures;
};

// Explains bytes already in memory (the service's POST /v1/explain); `name` is only echoed. An
// image that cannot be scored gives the scan record's error (code and message).
Result<Explanation> explain_bytes(const std::string& name, std::span<const std::uint8_t> bytes,
                                  const Model& model, const ScanSettings& settings);

// Reads and explains a file, and writes into `output_dir`: noise_residual.png,
// residual_spectrum.png, resampling_pmap_spectrum.png, coding_surprise.png (when the model has a
// camera pixel model), contributions.svg, summary.json and
// summary.txt (summary.json then also lists the pictures).
Result<Explanation> explain_image(const std::string& image, const Model& model, const ScanSettings& settings,
                                  const std::filesystem::path& output_dir);

}  // namespace residue
