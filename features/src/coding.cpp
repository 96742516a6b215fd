// Predictive coding cost: the MED predictor and context model of JPEG-LS (LOCO-I; Weinberger,
// Seroussi & Sapiro 2000; ISO/IEC 14495-1). See families.hpp and docs/features.md.
#include <algorithm>
#include <array>
#include <cmath>
#include <cstdint>
#include <numbers>

#include "residue/features/families.hpp"

namespace residue {

namespace {

constexpr int kContexts = 9 * 9 * 9;
constexpr int kSymbols = 256;

// 2 x 2 block means (integer samples rounded back to integers): the next coarser scale.
std::vector<int> halve(const std::vector<int>& x, int n) {
  const int h = n / 2;
  std::vector<int> out(static_cast<size_t>(h) * h);
  for (int y = 0; y < h; ++y) {
    for (int i = 0; i < h; ++i) {
      const size_t k = 2 * static_cast<size_t>(y) * n + 2 * static_cast<size_t>(i);
      const int sum = x[k] + x[k + 1] + x[k + n] + x[k + n + 1];
      out[static_cast<size_t>(y) * h + i] = (sum + 2) / 4;
    }
  }
  return out;
}

}  // namespace

int med_predict(int a, int b, int c) {
  if (c >= std::max(a, b)) return std::min(a, b);
  if (c <= std::min(a, b)) return std::max(a, b);
  return a + b - c;
}

int jpegls_gradient_region(int d) {
  constexpr int kT1 = 3, kT2 = 7, kT3 = 21;  // default thresholds for 8-bit samples, NEAR = 0
  if (d <= -kT3) return -4;
  if (d <= -kT2) return -3;
  if (d <= -kT1) return -2;
  if (d < 0) return -1;
  if (d == 0) return 0;
  if (d < kT1) return 1;
  if (d < kT2) return 2;
  if (d < kT3) return 3;
  return 4;
}

double coding_cost_bits(const std::vector<int>& samples, int n) {
  if (n < 3) return 0.0;
  // counts[context][residual + 128]; the context is (q1, q2, q3) with the sign merged so that the
  // first non-zero region is positive (the residual's sign flips with it), as the standard does.
  std::vector<std::array<std::uint32_t, kSymbols>> counts(kContexts);
  for (auto& c : counts) c.fill(0);
  std::vector<std::uint32_t> totals(kContexts, 0);
  auto at = [&](int y, int x) { return samples[static_cast<size_t>(y) * n + x]; };
  // jpegls_gradient_region for every difference of two 8-bit samples, looked up.
  static const std::array<int, 511> kRegion = [] {
    std::array<int, 511> t{};
    for (int d = -255; d <= 255; ++d) t[static_cast<size_t>(d) + 255] = jpegls_gradient_region(d);
    return t;
  }();
  auto region = [&](int d) {
    return d >= -255 && d <= 255 ? kRegion[static_cast<size_t>(d) + 255] : jpegls_gradient_region(d);
  };
  // Interior pixels with all four causal neighbours a (W), b (N), c (NW), d (NE).
  for (int y = 1; y < n; ++y) {
    for (int x = 1; x + 1 < n; ++x) {
      const int a = at(y, x - 1), b = at(y - 1, x), c = at(y - 1, x - 1), d = at(y - 1, x + 1);
      int q1 = region(d - b), q2 = region(b - c), q3 = region(c - a);
      int sign = 1;
      if (q1 < 0 || (q1 == 0 && (q2 < 0 || (q2 == 0 && q3 < 0)))) {
        q1 = -q1;
        q2 = -q2;
        q3 = -q3;
        sign = -1;
      }
      int e = sign * (at(y, x) - med_predict(a, b, c));
      e = ((e + 128) % 256 + 256) % 256 - 128;  // modulo reduction to [-128, 127]
      const int context = ((q1 + 4) * 9 + (q2 + 4)) * 9 + (q3 + 4);
      ++counts[static_cast<size_t>(context)][static_cast<size_t>(e) + 128];
      ++totals[static_cast<size_t>(context)];
    }
  }
  // Conditional empirical entropy with the Miller (1955) correction (K - 1) / (2 N ln 2) per
  // context, K the symbols seen: without it a few hundred samples per context look predictable.
  double bits = 0.0;
  double pixels = 0.0;
  for (int k = 0; k < kContexts; ++k) {
    const double total = totals[static_cast<size_t>(k)];
    if (total == 0) continue;
    double h = 0.0;
    int seen = 0;
    for (std::uint32_t c : counts[static_cast<size_t>(k)]) {
      if (c == 0) continue;
      const double p = c / total;
      h -= p * std::log2(p);
      ++seen;
    }
    h += (seen - 1) / (2.0 * total * std::numbers::ln2);
    bits += h * total;
    pixels += total;
  }
  return bits / pixels;
}

const std::vector<std::string>& coding_names() {
  static const std::vector<std::string> names = {
      "coding.jpegls.bits_full",       "coding.jpegls.bits_half",          "coding.jpegls.bits_quarter",
      "coding.jpegls.ratio_half_full", "coding.jpegls.ratio_quarter_half",
  };
  return names;
}

std::vector<double> coding_window(const WindowInput& window) {
  const int n = window.tile.size;
  std::vector<int> full(window.luma.size());
  for (size_t i = 0; i < full.size(); ++i) full[i] = static_cast<int>(std::lround(window.luma[i]));
  const auto half = halve(full, n);
  const auto quarter = halve(half, n / 2);
  const double b1 = coding_cost_bits(full, n);
  const double b2 = coding_cost_bits(half, n / 2);
  const double b4 = coding_cost_bits(quarter, n / 4);
  constexpr double kFloor = 0.05;  // bits: keeps ratios finite on flat windows
  return {b1, b2, b4, (b2 + kFloor) / (b1 + kFloor), (b4 + kFloor) / (b2 + kFloor)};
}

}  // namespace residue
