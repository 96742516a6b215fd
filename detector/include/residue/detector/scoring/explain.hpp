// Why one image scored as it did: pictures a person can look at and a short summary.
#pragma once

#include <filesystem>
#include <nlohmann/json.hpp>
#include <string>

#include "residue/detector/scoring/scan.hpp"

namespace residue {

struct Explanation {
  nlohmann::ordered_json summary;  // the scan record plus strongest_evidence and pictures
  std::string text;                // the same for a person, with the advisory notice
};

// Writes into `output_dir`: noise_residual.png (centre of the image, up to 1024 px),
// residual_spectrum.png (log power spectrum of the middle window's residual, N/8 grid marked),
// resampling_pmap_spectrum.png (Kirchner p-map spectrum), contributions.svg (per-family bar
// chart), summary.json and summary.txt.
Result<Explanation> explain_image(const std::string& image, const Model& model, const ScanSettings& settings,
                                  const std::filesystem::path& output_dir);

}  // namespace residue
