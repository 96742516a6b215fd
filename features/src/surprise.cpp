// Coding surprise against a camera model (surprise.hpp; docs/features.md, "Coding surprise").
#include "residue/features/surprise.hpp"

#include <algorithm>
#include <cmath>
#include <cstdlib>

#include "residue/features/families.hpp"
#include "residue/features/filters.hpp"
#include "residue/features/vector_clones.hpp"

namespace residue {

namespace {

constexpr double kMinMeanAbs = 0.05;
const char* const kLevelNames[kSurpriseLevels] = {"full", "half", "quarter"};

inline int med(int a, int b, int c) {
  const int lo = std::min(a, b);
  const int hi = std::max(a, b);
  return c >= hi ? lo : (c <= lo ? hi : a + b - c);
}

// |jpegls_gradient_region(d)| for every difference of two 8-bit samples.
const std::array<int, 511>& abs_regions() {
  static const std::array<int, 511> t = [] {
    std::array<int, 511> out{};
    for (int d = -255; d <= 255; ++d) out[static_cast<size_t>(d) + 255] = std::abs(jpegls_gradient_region(d));
    return out;
  }();
  return t;
}

inline int abs_region(int d) {
  return d >= -255 && d <= 255 ? abs_regions()[static_cast<size_t>(d) + 255]
                               : std::abs(jpegls_gradient_region(d));
}

}  // namespace

namespace {

// Calls fn(index, class, residual) for every pixel of an n x n plane with all four causal
// neighbours (rows 1.., columns 1..n-2), in raster order.
template <typename Fn>
inline void for_each_residual(const std::vector<int>& samples, int n, Fn&& fn) {
  if (n < 3) return;
  for (int y = 1; y < n; ++y) {
    const int* row = samples.data() + static_cast<size_t>(y) * n;
    const int* up = row - n;
    for (int x = 1; x + 1 < n; ++x) {
      const int a = row[x - 1], b = up[x], c = up[x - 1], d = up[x + 1];
      fn(static_cast<size_t>(y) * n + x, static_cast<size_t>(surprise_class(a, b, c, d)),
         reduced_residual(row[x], med(a, b, c)));
    }
  }
}

}  // namespace

int surprise_class(int a, int b, int c, int d) {
  return std::min(abs_region(d - b) + abs_region(b - c) + abs_region(c - a), kSurpriseClasses - 1);
}

int reduced_residual(int x, int prediction) { return ((x - prediction + 128) & 255) - 128; }

RESIDUE_VECTOR_CLONES ClassSums class_sums(const std::vector<int>& samples, int n) {
  ClassSums out;
  std::array<long long, kSurpriseClasses> pixels{};
  std::array<long long, kSurpriseClasses> abs_sum{};
  for_each_residual(samples, n, [&](size_t, size_t k, int r) {
    pixels[k] += 1;
    abs_sum[k] += std::abs(r);
  });
  for (size_t k = 0; k < pixels.size(); ++k) {
    out.pixels[k] = static_cast<double>(pixels[k]);
    out.abs_sum[k] = static_cast<double>(abs_sum[k]);
  }
  return out;
}

const std::vector<std::string>& surprise_names() {
  static const std::vector<std::string> names = [] {
    std::vector<std::string> out;
    for (const char* level : kLevelNames) {
      for (int c = 0; c < kSurpriseClasses; ++c) {
        const std::string stem = std::string("surprise.stats.") + level + ".c" + std::to_string(c);
        out.push_back(stem + ".share");
        out.push_back(stem + ".abs");
      }
    }
    for (const char* quantity : {"nll", "expected", "gap"}) {
      for (const char* level : kLevelNames) out.push_back(std::string("surprise.") + quantity + "." + level);
    }
    out.emplace_back("surprise.gap.slope");
    return out;
  }();
  return names;
}

bool is_model_value(const std::string& name) {
  return name.starts_with("surprise.") && !name.starts_with("surprise.stats.");
}

void append_class_stats(const ClassSums& sums, std::vector<double>& out) {
  double total = 0.0;
  for (double p : sums.pixels) total += p;
  for (int c = 0; c < kSurpriseClasses; ++c) {
    out.push_back(total > 0 ? sums.pixels[static_cast<size_t>(c)] / total : 0.0);
    out.push_back(total > 0 ? sums.abs_sum[static_cast<size_t>(c)] / total : 0.0);
  }
}

std::vector<double> surprise_window(const WindowInput& window) { return window.prediction().surprise_stats; }

double tsgd_theta(double mean_abs) {
  const double m = std::max(mean_abs, kMinMeanAbs);
  return (std::sqrt(1.0 + m * m) - 1.0) / m;
}

double tsgd_mean_abs(double theta) { return 2.0 * theta / (1.0 - theta * theta); }

double tsgd_entropy_bits(double theta) {
  return -std::log2((1.0 - theta) / (1.0 + theta)) - tsgd_mean_abs(theta) * std::log2(theta);
}

double tsgd_cost_bits(double theta, int r) {
  return -std::log2((1.0 - theta) / (1.0 + theta)) - std::abs(r) * std::log2(theta);
}

CameraPixelModel fit_camera_pixels(const std::vector<const double*>& rows) {
  CameraPixelModel model;
  model.images = rows.size();
  for (int level = 0; level < kSurpriseLevels; ++level) {
    for (int c = 0; c < kSurpriseClasses; ++c) {
      const size_t at = 2 * static_cast<size_t>(level * kSurpriseClasses + c);
      double share = 0.0;
      double abs_per_pixel = 0.0;
      for (const double* row : rows) {
        share += row[at];
        abs_per_pixel += row[at + 1];
      }
      const double m = share > 0 && abs_per_pixel > 0 ? abs_per_pixel / share : 0.0;
      model.mean_abs[static_cast<size_t>(level)][static_cast<size_t>(c)] = m;
      model.theta[static_cast<size_t>(level)][static_cast<size_t>(c)] = tsgd_theta(m);
    }
  }
  return model;
}

std::array<double, kSurpriseDerived> surprise_values(const CameraPixelModel& model, const double* stats) {
  constexpr size_t kLevels = kSurpriseLevels;
  constexpr size_t kClasses = kSurpriseClasses;
  std::array<double, kSurpriseDerived> out{};
  for (size_t level = 0; level < kLevels; ++level) {
    double nll = 0.0;
    double expected = 0.0;
    for (size_t c = 0; c < kClasses; ++c) {
      const double t = model.theta[level][c];
      const double a = -std::log2((1.0 - t) / (1.0 + t));
      const double b = -std::log2(t);
      const double f = stats[2 * (level * kClasses + c)];
      const double g = stats[2 * (level * kClasses + c) + 1];
      nll += f * a + g * b;
      expected += f * (a + b * tsgd_mean_abs(t));
    }
    out[level] = nll;
    out[kLevels + level] = expected;
    out[2 * kLevels + level] = nll - expected;
  }
  out[3 * kLevels] = (out[3 * kLevels - 1] - out[2 * kLevels]) / 2.0;
  return out;
}

std::vector<float> surprise_map(const CameraPixelModel& model, const std::vector<float>& luma, int n) {
  std::vector<int> samples(luma.size());
  for (size_t i = 0; i < samples.size(); ++i) samples[i] = round_half_away(luma[i]);
  std::vector<float> out(luma.size(), 0.0f);
  for_each_residual(samples, n, [&](size_t at, size_t k, int r) {
    const double t = model.theta[0][k];
    out[at] = static_cast<float>(-std::log2(t) * (std::abs(r) - tsgd_mean_abs(t)));
  });
  return out;
}

}  // namespace residue
