#include <algorithm>
#include <cmath>
#include <limits>

#include "residue/features/compression.hpp"

namespace residue {

const std::array<int, 64>& annex_k_luma_table() {
  static const std::array<int, 64> t = {16, 11, 10, 16, 24,  40,  51,  61,   //
                                        12, 12, 14, 19, 26,  58,  60,  55,   //
                                        14, 13, 16, 24, 40,  57,  69,  56,   //
                                        14, 17, 22, 29, 51,  87,  80,  62,   //
                                        18, 22, 37, 56, 68,  109, 103, 77,   //
                                        24, 35, 55, 64, 81,  104, 113, 92,   //
                                        49, 64, 78, 87, 103, 121, 120, 101,  //
                                        72, 92, 95, 98, 112, 100, 103, 99};
  return t;
}

const std::array<int, 64>& annex_k_chroma_table() {
  static const std::array<int, 64> t = [] {
    std::array<int, 64> c{};
    c.fill(99);
    const int top[4][4] = {{17, 18, 24, 47}, {18, 21, 26, 66}, {24, 26, 56, 99}, {47, 66, 99, 99}};
    for (int y = 0; y < 4; ++y) {
      for (int x = 0; x < 4; ++x) c[y * 8 + x] = top[y][x];
    }
    return c;
  }();
  return t;
}

std::array<int, 64> ijg_scaled_table(const std::array<int, 64>& base, int quality) {
  quality = std::clamp(quality, 1, 100);
  const long scale = quality < 50 ? 5000 / quality : 200 - 2 * quality;
  std::array<int, 64> t{};
  for (int k = 0; k < 64; ++k) t[k] = static_cast<int>(std::clamp((base[k] * scale + 50) / 100, 1L, 255L));
  return t;
}

QualityEstimate estimate_jpeg_quality(const JpegQuantTables& tables) {
  QualityEstimate best{0, false, std::numeric_limits<double>::infinity()};
  for (int q = 1; q <= 100; ++q) {
    const auto luma = ijg_scaled_table(annex_k_luma_table(), q);
    double err = 0.0;
    int count = 64;
    for (int k = 0; k < 64; ++k) err += std::abs(luma[k] - tables.luma[k]);
    if (tables.chroma) {
      const auto chroma = ijg_scaled_table(annex_k_chroma_table(), q);
      for (int k = 0; k < 64; ++k) err += std::abs(chroma[k] - (*tables.chroma)[k]);
      count += 64;
    }
    err /= count;
    if (err < best.mean_abs_error) best = {q, err == 0.0, err};
  }
  return best;
}

double block_grid_strength(const float* luma, int n) {
  // For each line, g(x) = Y(x+1) - Y(x) and e(x) = |2 g(x) - g(x-1) - g(x+1)|: a gradient that
  // jumps against its neighbours, as at a block edge, while smooth ramps give 0.
  auto strength = [&](bool rows) {
    double phase[8] = {0, 0, 0, 0, 0, 0, 0, 0};
    double count[8] = {0, 0, 0, 0, 0, 0, 0, 0};
    auto at = [&](int line, int x) {
      return rows ? luma[static_cast<size_t>(line) * n + x] : luma[static_cast<size_t>(x) * n + line];
    };
    for (int line = 0; line < n; ++line) {
      for (int x = 1; x + 2 < n; ++x) {
        const double g0 = at(line, x) - at(line, x - 1);
        const double g1 = at(line, x + 1) - at(line, x);
        const double g2 = at(line, x + 2) - at(line, x + 1);
        phase[x % 8] += std::fabs(2 * g1 - g0 - g2);
        count[x % 8] += 1.0;
      }
    }
    for (int p = 0; p < 8; ++p) phase[p] /= std::max(count[p], 1.0);
    const int peak = static_cast<int>(std::max_element(phase, phase + 8) - phase);
    double others[7];
    int k = 0;
    for (int p = 0; p < 8; ++p) {
      if (p != peak) others[k++] = phase[p];
    }
    std::nth_element(others, others + 3, others + 7);
    return (phase[peak] + 1e-9) / (others[3] + 1e-9);
  };
  return 0.5 * (strength(true) + strength(false));
}

}  // namespace residue
