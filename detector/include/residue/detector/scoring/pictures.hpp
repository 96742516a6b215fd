// Pictures a person can look at: thumbnails, the noise residual, log power spectra with the
// upsampling grid marked, bar charts; encoded as PNG files or data: URIs for self-contained HTML.
#pragma once

#include <filesystem>
#include <map>
#include <string>
#include <vector>

#include "residue/features/image.hpp"
#include "residue/features/surprise.hpp"
#include "residue/features/status.hpp"

namespace residue {

// Box-filtered reduction so the longer side is at most `max_side` (never enlarges).
Image thumbnail(const Image& image, int max_side);

// |luma - median3(luma)| of a whole image, stretched so the 99th percentile is white.
Image residual_picture(const Image& image);

// Centred (DC in the middle) log10 power spectrum of an N x N array, stretched between its 1st
// and 99.9th percentiles; with `mark_grid`, the points k N/8 get small red corner marks (the
// frequencies upsampling decoders leave, docs/features.md). Returns an RGB image.
Image spectrum_picture(const std::vector<float>& window, int n, bool mark_grid);

// Each pixel repeated `factor` times in both directions, for viewing small pictures.
Image enlarge(const Image& image, int factor);
// The per-pixel coding surprise of an n x n luma window under a camera pixel model
// (surprise_map()): RGB, red for a positive gap, blue for a negative one, both scaled by the 99th
// percentile of |gap|.
Image surprise_picture(const CameraPixelModel& model, const std::vector<float>& luma, int n);

// "data:image/png;base64,..." of an image (8-bit, clamped).
std::string png_data_uri(const Image& image);
Result<bool> write_png(const Image& image, const std::filesystem::path& path);

// A horizontal bar chart (inline SVG) of signed values, e.g. per-family margin contributions.
std::string bar_chart_svg(const std::map<std::string, double>& values, const std::string& caption);

}  // namespace residue
