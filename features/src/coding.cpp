// Predictive coding cost: the MED predictor and context model of JPEG-LS (LOCO-I; Weinberger,
// Seroussi & Sapiro 2000; ISO/IEC 14495-1). See families.hpp and docs/features.md.
#include <algorithm>
#include <array>
#include <bit>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <numbers>

#include "residue/features/families.hpp"
#include "residue/features/filters.hpp"
#include "residue/features/surprise.hpp"
#include "residue/features/vector_clones.hpp"

namespace residue {

namespace {

constexpr int kContexts = 9 * 9 * 9;
constexpr int kSymbols = 256;

}  // namespace

std::vector<int> halve_samples(const std::vector<int>& x, int n) {
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

std::vector<int> integer_luma(const WindowInput& window) {
  std::vector<int> out(window.luma.size());
  for (size_t i = 0; i < out.size(); ++i) out[i] = round_half_away(window.luma[i]);
  return out;
}

namespace {

// The MED predictor written as selections, so that the coding loop keeps it inline and branch-free.
inline int med(int a, int b, int c) {
  const int lo = std::min(a, b);
  const int hi = std::max(a, b);
  const int inside = a + b - c;
  return c >= hi ? lo : (c <= lo ? hi : inside);
}

}  // namespace

int med_predict(int a, int b, int c) { return med(a, b, c); }

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

RESIDUE_VECTOR_CLONES double coding_cost_bits(const std::vector<int>& samples, int n, ClassSums* classes) {
  if (classes != nullptr) *classes = ClassSums{};
  if (n < 3) return 0.0;
  // counts[context][residual + 128]; the context is (q1, q2, q3) with the sign merged so that the
  // first non-zero region is positive (the residual's sign flips with it), as the standard does.
  // The table (729 x 256 counters) is kept per thread and only the counters used are read and
  // cleared afterwards, found through a bit mask of the symbols seen in each context.
  struct Scratch {
    std::vector<std::array<std::uint32_t, kSymbols>> counts{kContexts, std::array<std::uint32_t, kSymbols>{}};
    std::vector<std::uint32_t> totals = std::vector<std::uint32_t>(kContexts, 0);
    std::vector<std::array<std::uint64_t, kSymbols / 64>> seen{kContexts,
                                                               std::array<std::uint64_t, kSymbols / 64>{}};
  };
  thread_local Scratch scratch;
  auto& counts = scratch.counts;
  auto& totals = scratch.totals;
  auto& seen_symbols = scratch.seen;
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
  // The context of every (q1, q2, q3) before the sign is merged, with the sign it was merged by.
  struct Folded {
    std::uint16_t context;
    std::int16_t sign;
    std::uint16_t activity;  // the surprise family's class, min(|q1| + |q2| + |q3|, 8)
  };
  static const std::array<Folded, kContexts> kFold = [] {
    std::array<Folded, kContexts> t{};
    for (int q1 = -4; q1 <= 4; ++q1) {
      for (int q2 = -4; q2 <= 4; ++q2) {
        for (int q3 = -4; q3 <= 4; ++q3) {
          const bool flip = q1 < 0 || (q1 == 0 && (q2 < 0 || (q2 == 0 && q3 < 0)));
          const int s = flip ? -1 : 1;
          const int raw = ((q1 + 4) * 9 + (q2 + 4)) * 9 + (q3 + 4);
          const int folded = ((s * q1 + 4) * 9 + (s * q2 + 4)) * 9 + (s * q3 + 4);
          const int activity = std::min(std::abs(q1) + std::abs(q2) + std::abs(q3), kSurpriseClasses - 1);
          t[static_cast<size_t>(raw)] = {static_cast<std::uint16_t>(folded), static_cast<std::int16_t>(s),
                                         static_cast<std::uint16_t>(activity)};
        }
      }
    }
    return t;
  }();
  // The surprise family's per-class pixels and sum of |r| (|symbol - 128| is |r| whichever sign
  // the context merged in), counted as integers.
  std::array<long long, kSurpriseClasses> class_pixels{};
  std::array<long long, kSurpriseClasses> class_abs{};
  // Interior pixels with all four causal neighbours a (W), b (N), c (NW), d (NE).
  for (int y = 1; y < n; ++y) {
    for (int x = 1; x + 1 < n; ++x) {
      const int a = at(y, x - 1), b = at(y - 1, x), c = at(y - 1, x - 1), d = at(y - 1, x + 1);
      const int raw = ((region(d - b) + 4) * 9 + (region(b - c) + 4)) * 9 + (region(c - a) + 4);
      const Folded f = kFold[static_cast<size_t>(raw)];
      // The residual reduced modulo 256 to [-128, 127], stored at residual + 128 (the & of a
      // negative int is two's complement in C++20).
      const int shifted = f.sign * (at(y, x) - med(a, b, c)) + 128;
      const auto symbol = static_cast<size_t>(shifted & 255);
      const size_t context = f.context;
      ++counts[context][symbol];
      ++totals[context];
      seen_symbols[context][symbol / 64] |= std::uint64_t{1} << (symbol % 64);
      class_pixels[f.activity] += 1;
      class_abs[f.activity] += std::abs(static_cast<int>(symbol) - 128);
    }
  }
  if (classes != nullptr) {
    for (size_t k = 0; k < class_pixels.size(); ++k) {
      classes->pixels[k] = static_cast<double>(class_pixels[k]);
      classes->abs_sum[k] = static_cast<double>(class_abs[k]);
    }
  }
  // Conditional empirical entropy with the Miller (1955) correction (K - 1) / (2 N ln 2) per
  // context, K the symbols seen: without it a few hundred samples per context look predictable.
  // Symbols in increasing order, as a walk over the whole row would take them.
  double bits = 0.0;
  double pixels = 0.0;
  for (size_t k = 0; k < static_cast<size_t>(kContexts); ++k) {
    const double total = totals[k];
    if (total == 0) continue;
    double h = 0.0;
    int seen = 0;
    for (size_t word = 0; word < seen_symbols[k].size(); ++word) {
      for (std::uint64_t mask = seen_symbols[k][word]; mask != 0; mask &= mask - 1) {
        const size_t symbol = word * 64 + static_cast<size_t>(std::countr_zero(mask));
        const double p = counts[k][symbol] / total;
        h -= p * std::log2(p);
        ++seen;
        counts[k][symbol] = 0;
      }
      seen_symbols[k][word] = 0;
    }
    totals[k] = 0;
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

const WindowInput::Prediction& WindowInput::prediction() const {
  if (prediction_kept) return *prediction_kept;
  Prediction p;
  p.surprise_stats.reserve(surprise_names().size());
  int n = tile.size;
  std::vector<int> plane = integer_luma(*this);
  for (size_t level = 0; level < p.bits.size(); ++level) {
    if (level > 0) {
      plane = halve_samples(plane, n);
      n /= 2;
    }
    ClassSums classes;
    p.bits[level] = coding_cost_bits(plane, n, &classes);
    append_class_stats(classes, p.surprise_stats);
  }
  p.surprise_stats.resize(surprise_names().size(), 0.0);  // the model-filled values: zeros
  prediction_kept = std::move(p);
  return *prediction_kept;
}

std::vector<double> coding_window(const WindowInput& window) {
  const auto& bits = window.prediction().bits;
  const double b1 = bits[0];
  const double b2 = bits[1];
  const double b4 = bits[2];
  constexpr double kFloor = 0.05;  // bits: keeps ratios finite on flat windows
  return {b1, b2, b4, (b2 + kFloor) / (b1 + kFloor), (b4 + kFloor) / (b2 + kFloor)};
}

}  // namespace residue
