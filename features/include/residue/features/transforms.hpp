// Everyday processing, applied to a file the way platforms and people process uploads: JPEG
// recompression, lossy WebP, downscaling and upscaling, palette quantisation, sharpening, cropping,
// screenshot-like rescaling. And laundering: what someone does to a generated image so that it
// passes (blur, grain, a denoiser, a resize-and-recompress chain, a print-and-scan-like chain). For `residue
// evaluate --processing`, benchmarks and tests: what a model does on processed copies of images whose class
// is known.
//
// Each transform decodes the whole image (alpha dropped), changes it and encodes it again; names
// are stable (they appear in reports). Thread safety: pure functions.
#pragma once

#include <array>
#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "residue/features/decode.hpp"

namespace residue {

struct TransformInfo {
  std::string name;         // e.g. "jpeg-q75"
  std::string description;  // plain words
};

// The everyday transforms, "as-published" (the file unchanged) first.
const std::vector<TransformInfo>& everyday_transforms();

// The laundering transforms (they follow the everyday ones in `evaluate --processing`).
const std::vector<TransformInfo>& laundering_transforms();

// Everyday then laundering: what `evaluate --processing` runs by default.
std::vector<TransformInfo> processing_transforms();

// Applies a named transform to a file's bytes; kUnsupported for an unknown name. Besides the
// everyday names, parametrised ones: "jpeg-qN" and "webp-qN" (quality 1..100), "downscale-F"
// (area filter, saved as PNG) and "crop-centre-F" (each side times F, saved as PNG), 0 < F < 1;
// "upscale-F" (bicubic, saved as PNG), 1 < F <= 4;
// "blur-S" (Gaussian, sigma S px, 0.3..5) and "noise-S" (additive Gaussian, sigma S grey levels,
// 0.5..20), saved as PNG.
Result<std::vector<std::uint8_t>> apply_transform(std::span<const std::uint8_t> bytes,
                                                  const std::string& name, const DecodeLimits& limits = {});

// Median-cut colour quantisation (Heckbert 1982, "Color image quantization for frame buffer
// display"): starting from one box around all pixels, the box holding the most pixels is split at
// the median of its longest side, until there are `colours` boxes (or no box can be split); each
// box's mean colour is a palette entry and each pixel takes its box's entry (no dithering). Returns the index
// plane (row-major) and the palette.
struct Quantised {
  std::vector<std::uint8_t> indices;
  std::vector<std::array<std::uint8_t, 3>> palette;
};
Quantised median_cut(const Image& image, int colours);

}  // namespace residue
