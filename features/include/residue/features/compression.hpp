// Compression history: JPEG quality from the quantisation tables and the 8 x 8 block-grid
// strength in the pixels. Reported and audited, never learned: in most collections the file
// format differs between classes, and a model that learned it would score the container.
#pragma once

#include <array>
#include <optional>

#include "residue/features/decode.hpp"

namespace residue {

// ITU-T T.81 (1992) Annex K, Tables K.1 (luminance) and K.2 (chrominance), natural order.
const std::array<int, 64>& annex_k_luma_table();
const std::array<int, 64>& annex_k_chroma_table();

// The IJG libjpeg scaling of a base table to a quality 1..100 (jcparam.c, with baseline
// clamping to 1..255): scale = q < 50 ? 5000 / q : 200 - 2 q; entry = (base * scale + 50) / 100.
std::array<int, 64> ijg_scaled_table(const std::array<int, 64>& base, int quality);

struct QualityEstimate {
  int quality = 0;            // 1..100, the IJG quality whose tables match best
  bool exact = false;         // the file's tables equal the scaled Annex K tables
  double mean_abs_error = 0;  // between the file's tables and the best match
};
QualityEstimate estimate_jpeg_quality(const JpegQuantTables& tables);

// Strength of an 8-periodic block grid in an N x N luma window: for each of the 8 phases, the
// mean second difference of the gradient |2 g(x) - g(x-1) - g(x+1)| with g(x) = Y(x+1) - Y(x);
// the largest phase mean over the median of the other seven, averaged over rows and columns.
// About 1 without a grid; about 1.5 at JPEG quality 75 (measured on scikit-image's coffee).
double block_grid_strength(const float* luma, int n);

struct CompressionHistory {
  std::optional<QualityEstimate> jpeg;  // JPEG files only
  double block_grid_strength = 1.0;     // mean over windows
};

}  // namespace residue
