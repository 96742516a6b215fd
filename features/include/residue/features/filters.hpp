// Residual filters and the statistics built on them: rich-model kernels, quantised co-occurrences,
// SPAM transition probabilities and Immerkaer's noise estimate. Pure functions of pixels.
//
// Images are row-major float arrays on a 0..255 scale. Filtering is correlation in "valid" mode
// (no padding): an image of w x h and a kernel of kw x kh give (w - kw + 1) x (h - kh + 1) values.
#pragma once

#include <cstdint>
#include <span>
#include <string_view>
#include <vector>

namespace residue {

// std::lround of a float with |v| < 2^31, without the library call: truncate, then step away from
// zero when the dropped fraction (exact in float arithmetic) is at least one half.
inline int round_half_away(float v) {
  const int i = static_cast<int>(v);
  const float fraction = v - static_cast<float>(i);
  return i + static_cast<int>(fraction >= 0.5F) - static_cast<int>(fraction <= -0.5F);
}

struct Kernel {
  std::string_view name;
  int width = 0;
  int height = 0;
  std::vector<double> taps;  // row-major
  double step = 1.0;         // quantisation step q = c, the kernel's central coefficient magnitude
  bool directional = false;  // applied horizontally and, transposed, vertically

  [[nodiscard]] Kernel transposed() const;
};

// The five rich-model residual kernels of Fridrich & Kodovsky (2012): first, second and third
// order (horizontal form) and the SQUARE 3x3 and 5x5 ("KV") kernels.
const std::vector<Kernel>& rich_model_kernels();

struct Plane {
  int width = 0;
  int height = 0;
  std::vector<float> values;
};

Plane correlate_valid(const float* image, int width, int height, const Kernel& kernel);

// Number of classes of (a, b) in [-T, T]^2 folded by sign, (a, b) ~ (-a, -b), and by order,
// (a, b) ~ (b, a): 9 for T = 2.
int folded_pair_classes(int t);

// Histogram of pairs of neighbouring quantised residuals, clamp(round(r / step), -T, T), folded by
// sign and order symmetry and normalised to sum 1. Pairs run along rows when `along_rows`, else
// along columns. Adds into `histogram` (size folded_pair_classes(t)) and returns the pair count.
long add_folded_pairs(const Plane& residual, double step, int t, bool along_rows,
                      std::vector<double>& histogram);

// A residual quantised as clamp(round(r / step), -T, T) + T (0..2T), for the co-occurrences below.
struct QuantisedPlane {
  int width = 0;
  int height = 0;
  int t = 2;
  std::vector<std::uint8_t> q;
};
QuantisedPlane quantise(const Plane& residual, double step, int t);

// Higher-order co-occurrences of the rich model (Fridrich & Kodovsky 2012): tuples of `order`
// neighbouring quantised residuals along rows (or columns), folded by sign,
// (a, b, c) ~ (-a, -b, -c), and by direction, (a, b, c) ~ (c, b, a), as the paper symmetrises
// them. Classes for T = 2: 9 pairs, 39 triples, 169 quadruples. Adds the raw counts into
// `histogram` (size folded_tuple_classes(t, order, true)) and returns the tuple count.
// add_folded_pairs is order 2.
int folded_tuple_classes(int t, int order, bool reverse);
long add_folded_tuples(const QuantisedPlane& q, int order, bool along_rows, std::vector<double>& histogram);

// Every order from 2 to histograms.size() + 1 in one pass over the plane: histograms[k - 2] gets
// the folded tuples of order k, as add_folded_tuples would count them (the lower orders are the
// marginals of the highest plus the tuples at the end of each row or column). Returns the tuple
// count of each order.
std::vector<long> add_folded_tuple_orders(const QuantisedPlane& q, bool along_rows,
                                          std::span<std::vector<double>> histograms);

// Cross-colour co-occurrence (Goljan, Fridrich & Cogranne 2014, colour rich model): the triple of
// quantised residuals (R, G, B) at one pixel, folded by sign only (the channels keep their order):
// 63 classes for T = 2 (folded_tuple_classes(t, 3, false)). Planes of equal size; returns the count.
long add_cross_channel_triples(const QuantisedPlane& r, const QuantisedPlane& g, const QuantisedPlane& b,
                               std::vector<double>& histogram);

// First-order SPAM features (Pevny, Bas & Fridrich 2010): transition probabilities
// M(u, v) = Pr(D(i, j+1) = u | D(i, j) = v) of pixel differences D truncated to [-T, T], averaged
// over the four straight directions (first (2T+1)^2 values, index (u+T)(2T+1) + (v+T)) and the
// four diagonal ones (next (2T+1)^2 values). Pixels are rounded to integers first.
std::vector<double> spam_first_order(const float* image, int width, int height, int t);

// Immerkaer (1996) fast noise estimate: sigma = sqrt(pi/2) / (6 (W-2)(H-2)) * sum |I * N|,
// N = [[1,-2,1],[-2,4,-2],[1,-2,1]]. In the image's units.
double immerkaer_sigma(const float* image, int width, int height);

// Sample moments of a residual: variance and excess kurtosis (Fisher's definition, 0 for a
// Gaussian), population (biased) estimators as in scipy.stats.kurtosis(bias=True).
struct Moments {
  double variance = 0.0;
  double excess_kurtosis = 0.0;
};
Moments moments(std::span<const float> values);

// Power sums for moments over several arrays in one pass each (residuals have mean near 0, so
// the raw-moment formulas lose no precision that matters here).
struct MomentSums {
  double s1 = 0, s2 = 0, s3 = 0, s4 = 0;
  size_t count = 0;
  void add(std::span<const float> values);
  [[nodiscard]] Moments moments() const;
};

}  // namespace residue
