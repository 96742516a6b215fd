#include "residue/features/filters.hpp"

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <map>
#include <mutex>
#include <numbers>
#include <tuple>
#include <utility>

#include "residue/features/vector_clones.hpp"

namespace residue {

Kernel Kernel::transposed() const {
  Kernel k = *this;
  k.width = height;
  k.height = width;
  for (int y = 0; y < height; ++y) {
    for (int x = 0; x < width; ++x) k.taps[x * k.width + y] = taps[y * width + x];
  }
  return k;
}

const std::vector<Kernel>& rich_model_kernels() {
  static const std::vector<Kernel> kernels = {
      {"o1", 2, 1, {-1, 1}, 1.0, true},
      {"o2", 3, 1, {1, -2, 1}, 2.0, true},
      {"o3", 4, 1, {1, -3, 3, -1}, 3.0, true},
      {"kv3", 3, 3, {-1, 2, -1, 2, -4, 2, -1, 2, -1}, 4.0, false},
      {"kv5",
       5,
       5,
       {-1, 2,  -2,  2,  -1,  //
        2,  -6, 8,   -6, 2,   //
        -2, 8,  -12, 8,  -2,  //
        2,  -6, 8,   -6, 2,   //
        -1, 2,  -2,  2,  -1},
       12.0,
       false},
  };
  return kernels;
}

RESIDUE_VECTOR_CLONES Plane correlate_valid(const float* image, int width, int height, const Kernel& kernel) {
  Plane out{width - kernel.width + 1, height - kernel.height + 1, {}};
  if (out.width <= 0 || out.height <= 0) return Plane{};
  out.values.assign(static_cast<size_t>(out.width) * out.height, 0.0F);
  // Row by row, so that the row being summed stays in the first-level cache across the taps; each
  // value still adds the taps in the same order (bit for bit the same as tap by tap over the plane).
  for (int y = 0; y < out.height; ++y) {
    float* dst = out.values.data() + static_cast<size_t>(y) * out.width;
    for (int ky = 0; ky < kernel.height; ++ky) {
      for (int kx = 0; kx < kernel.width; ++kx) {
        const auto tap = static_cast<float>(kernel.taps[ky * kernel.width + kx]);
        if (tap == 0.0F) continue;
        const float* src = image + static_cast<size_t>(y + ky) * width + kx;
        for (int x = 0; x < out.width; ++x) dst[x] += tap * src[x];
      }
    }
  }
  return out;
}

namespace {

// Class index of each tuple in [-T, T]^order (row-major, first element slowest) under the sign
// symmetry and, when `reverse`, the direction symmetry; classes numbered in lexicographic order of
// their smallest member. Cheap: (2T+1)^order entries.
std::vector<int> make_folded_index(int t, int order, bool reverse) {
  const int side = 2 * t + 1;
  size_t cells = 1;
  for (int k = 0; k < order; ++k) cells *= static_cast<size_t>(side);
  std::map<std::vector<int>, int> classes;
  std::vector<std::vector<int>> canon(cells);
  std::vector<int> tuple(static_cast<size_t>(order));
  for (size_t i = 0; i < cells; ++i) {
    size_t rest = i;
    for (int k = order - 1; k >= 0; --k) {
      tuple[static_cast<size_t>(k)] = static_cast<int>(rest % static_cast<size_t>(side)) - t;
      rest /= static_cast<size_t>(side);
    }
    std::vector<int> negated(tuple);
    for (int& v : negated) v = -v;
    auto key = std::min(tuple, negated);
    if (reverse) {
      key = std::min({key, std::vector<int>(tuple.rbegin(), tuple.rend()),
                      std::vector<int>(negated.rbegin(), negated.rend())});
    }
    canon[i] = key;
    classes.emplace(key, 0);
  }
  int next = 0;
  for (auto& entry : classes) entry.second = next++;
  std::vector<int> index(cells);
  for (size_t i = 0; i < cells; ++i) index[i] = classes[canon[i]];
  return index;
}

// Round half away from zero (as std::lround) without a library call, then truncate to [-T, T].
int round_clamped(float v, int t) {
  const float c = std::clamp(v, -static_cast<float>(t) - 1.0F, static_cast<float>(t) + 1.0F);
  return std::clamp(static_cast<int>(c >= 0 ? c + 0.5F : c - 0.5F), -t, t);
}

const std::vector<int>& folded_index(int t, int order, bool reverse) {
  static std::mutex mutex;
  static std::map<std::tuple<int, int, bool>, std::vector<int>> tables;
  std::lock_guard lock(mutex);
  auto [it, added] = tables.try_emplace({t, order, reverse});
  if (added) it->second = make_folded_index(t, order, reverse);
  return it->second;  // map nodes never move
}

}  // namespace

int folded_tuple_classes(int t, int order, bool reverse) {
  const auto& index = folded_index(t, order, reverse);
  return *std::max_element(index.begin(), index.end()) + 1;
}

int folded_pair_classes(int t) { return folded_tuple_classes(t, 2, true); }

RESIDUE_VECTOR_CLONES QuantisedPlane quantise(const Plane& residual, double step, int t) {
  QuantisedPlane out{residual.width, residual.height, t, std::vector<std::uint8_t>(residual.values.size())};
  const auto inverse = static_cast<float>(1.0 / step);
  // round_clamped(v, t) + t, written without branches so that the compiler vectorises it.
  const float lo = -static_cast<float>(t) - 0.5F;
  const float hi = static_cast<float>(t) + 0.5F;
  const float* v = residual.values.data();
  std::uint8_t* q = out.q.data();
  for (size_t i = 0; i < out.q.size(); ++i) {
    const float c = std::min(std::max(v[i] * inverse, lo), hi);
    const float r = c + (c >= 0.0F ? 0.5F : -0.5F);
    const int k = std::min(std::max(static_cast<int>(r), -t), t);
    q[i] = static_cast<std::uint8_t>(k + t);
  }
  return out;
}

namespace {

size_t tuple_cells(int t, int order) {
  size_t cells = 1;
  for (int k = 0; k < order; ++k) cells *= 2 * static_cast<size_t>(t) + 1;
  return cells;
}

// Adds to `raw` (tuple_cells(t, order) counters, unfolded) the tuples of `order` neighbours along
// rows (or columns) whose first element lies at position [first, last) along that direction, over
// the whole other direction. Counted into four interleaved copies, so that a run of one tuple (a
// smooth area) does not wait on the previous increment of the same counter.
RESIDUE_VECTOR_CLONES void count_raw_tuples(const QuantisedPlane& q, int order, bool along_rows, int first,
                                            int last, std::uint32_t* raw) {
  const auto side = static_cast<std::uint32_t>(2 * q.t + 1);
  const size_t cells = tuple_cells(q.t, order);
  const int w = q.width;
  const size_t stride = along_rows ? 1 : static_cast<size_t>(w);
  thread_local std::vector<std::uint32_t> lanes;
  thread_local std::vector<std::uint32_t> codes;
  lanes.assign(4 * cells, 0);
  std::uint32_t* lane[4] = {lanes.data(), lanes.data() + cells, lanes.data() + 2 * cells,
                            lanes.data() + 3 * cells};
  // Along rows: each row, starts x in [first, last). Along columns: rows y in [first, last), every x.
  const int y_begin = along_rows ? 0 : first;
  const int y_end = along_rows ? q.height : last;
  const int x_begin = along_rows ? first : 0;
  const int x_end = along_rows ? last : w;
  const auto length = static_cast<size_t>(std::max(0, x_end - x_begin));
  codes.resize(length);
  std::uint32_t* code = codes.data();
  for (int y = y_begin; y < y_end; ++y) {
    // The cell of each tuple of the row, built one element at a time over the whole row (a loop
    // the compiler vectorises), then counted.
    const std::uint8_t* start = q.q.data() + static_cast<size_t>(y) * w + x_begin;
    for (size_t x = 0; x < length; ++x) code[x] = start[x];
    for (int k = 1; k < order; ++k) {
      const std::uint8_t* element = start + static_cast<size_t>(k) * stride;
      for (size_t x = 0; x < length; ++x) code[x] = code[x] * side + element[x];
    }
    for (size_t x = 0; x < length; ++x) ++lane[(x_begin + x) & 3][code[x]];
  }
  for (size_t i = 0; i < cells; ++i) raw[i] += lane[0][i] + lane[1][i] + lane[2][i] + lane[3][i];
}

// Starts along the direction (positions where a tuple of `order` fits), times the other direction.
long tuple_count(const QuantisedPlane& q, int order, bool along_rows) {
  const int starts = (along_rows ? q.width : q.height) - order + 1;
  return starts > 0 ? static_cast<long>(starts) * (along_rows ? q.height : q.width) : 0;
}

void add_folded_raw(const std::vector<std::uint32_t>& raw, const std::vector<int>& index,
                    std::vector<double>& histogram) {
  for (size_t i = 0; i < raw.size(); ++i)
    histogram[static_cast<size_t>(index[i])] += static_cast<double>(raw[i]);
}

}  // namespace

long add_folded_tuples(const QuantisedPlane& q, int order, bool along_rows, std::vector<double>& histogram) {
  // Count raw tuples first, fold once at the end.
  std::vector<std::uint32_t> raw(tuple_cells(q.t, order), 0);
  const long tuples = tuple_count(q, order, along_rows);
  if (tuples > 0) {
    const int starts = (along_rows ? q.width : q.height) - order + 1;
    count_raw_tuples(q, order, along_rows, 0, starts, raw.data());
  }
  add_folded_raw(raw, folded_index(q.t, order, true), histogram);
  return tuples;
}

std::vector<long> add_folded_tuple_orders(const QuantisedPlane& q, bool along_rows,
                                          std::span<std::vector<double>> histograms) {
  const int top = static_cast<int>(histograms.size()) + 1;
  std::vector<long> counts(histograms.size(), 0);
  const int length = along_rows ? q.width : q.height;
  if (top < 2) return counts;
  if (length < top) {  // too short for the highest order: each order on its own
    for (int order = 2; order <= top; ++order)
      counts[order - 2] = add_folded_tuples(q, order, along_rows, histograms[order - 2]);
    return counts;
  }
  const size_t side = 2 * static_cast<size_t>(q.t) + 1;
  std::vector<std::uint32_t> raw(tuple_cells(q.t, top), 0);
  count_raw_tuples(q, top, along_rows, 0, length - top + 1, raw.data());
  for (int order = top;; --order) {
    add_folded_raw(raw, folded_index(q.t, order, true), histograms[order - 2]);
    counts[order - 2] = tuple_count(q, order, along_rows);
    if (order == 2) break;
    // The tuples of order - 1 are those of `order` without their last element, plus the ones
    // starting at the one position where a tuple of `order` no longer fits.
    std::vector<std::uint32_t> lower(raw.size() / side, 0);
    for (size_t i = 0; i < lower.size(); ++i) {
      for (size_t e = 0; e < side; ++e) lower[i] += raw[i * side + e];
    }
    count_raw_tuples(q, order - 1, along_rows, length - order + 1, length - order + 2, lower.data());
    raw = std::move(lower);
  }
  return counts;
}

long add_folded_pairs(const Plane& residual, double step, int t, bool along_rows,
                      std::vector<double>& histogram) {
  return add_folded_tuples(quantise(residual, step, t), 2, along_rows, histogram);
}

long add_cross_channel_triples(const QuantisedPlane& r, const QuantisedPlane& g, const QuantisedPlane& b,
                               std::vector<double>& histogram) {
  const auto& index = folded_index(r.t, 3, false);
  const size_t side = 2 * static_cast<size_t>(r.t) + 1;
  std::vector<std::uint32_t> raw(index.size(), 0);
  for (size_t i = 0; i < r.q.size(); ++i) ++raw[(r.q[i] * side + g.q[i]) * side + b.q[i]];
  for (size_t i = 0; i < raw.size(); ++i)
    histogram[static_cast<size_t>(index[i])] += static_cast<double>(raw[i]);
  return static_cast<long>(r.q.size());
}

RESIDUE_VECTOR_CLONES std::vector<double> spam_first_order(const float* image, int width, int height, int t) {
  const int side = 2 * t + 1;
  const size_t cells = static_cast<size_t>(side) * side;
  std::vector<int> px(static_cast<size_t>(width) * height);
  for (size_t i = 0; i < px.size(); ++i) px[i] = round_clamped(image[i], 1 << 20);
  // Each of the four axes (rows, columns, two diagonals) is walked once, forwards: J(a, b) counts
  // consecutive truncated differences a = D(k), b = D(k+1), D(k) = I(k) - I(k+1). The backward
  // direction on the same axis sees the differences negated and in reverse order, so its
  // transitions v -> u are J(-u, -v). SPAM's eight directions come from these four counts.
  static constexpr int kAxes[4][2] = {{0, 1}, {1, 0}, {1, 1}, {1, -1}};
  std::vector<double> features(2 * cells, 0.0);
  for (int a = 0; a < 4; ++a) {
    const int dy = kAxes[a][0];
    const int dx = kAxes[a][1];
    // Counted as integers (exact, as the doubles they become): the cells of a row first (a loop
    // the compiler vectorises), then counted into four interleaved copies.
    std::vector<std::uint32_t> counts(4 * cells, 0);
    const int x_lo = dx < 0 ? 2 : 0;
    const int x_hi = dx > 0 ? width - 2 : width;
    std::vector<int> cell(static_cast<size_t>(std::max(0, x_hi - x_lo)));
    for (int y = 0; y + 2 * dy < height; ++y) {
      const int* r0 = px.data() + static_cast<size_t>(y) * width + x_lo;
      const int* r1 = r0 + static_cast<ptrdiff_t>(dy) * width + dx;
      const int* r2 = r1 + static_cast<ptrdiff_t>(dy) * width + dx;
      for (size_t x = 0; x < cell.size(); ++x) {
        const int d0 = std::clamp(r0[x] - r1[x], -t, t);
        const int d1 = std::clamp(r1[x] - r2[x], -t, t);
        cell[x] = (d0 + t) * side + (d1 + t);
      }
      for (size_t x = 0; x < cell.size(); ++x) ++counts[(x & 3) * cells + static_cast<size_t>(cell[x])];
    }
    std::vector<double> joint(cells);
    for (size_t i = 0; i < cells; ++i) {
      joint[i] =
          static_cast<double>(counts[i] + counts[cells + i] + counts[2 * cells + i] + counts[3 * cells + i]);
    }
    const size_t offset = a < 2 ? 0 : cells;
    for (int backward = 0; backward < 2; ++backward) {
      // M(u | v) = J(v, u) / sum_u J(v, u) forwards; J(-u, -v) / sum_u J(-u, -v) backwards.
      for (int v = -t; v <= t; ++v) {
        double marginal = 0.0;
        for (int u = -t; u <= t; ++u) {
          marginal += backward ? joint[(-u + t) * side + (-v + t)] : joint[(v + t) * side + (u + t)];
        }
        if (marginal == 0.0) continue;
        for (int u = -t; u <= t; ++u) {
          const double j = backward ? joint[(-u + t) * side + (-v + t)] : joint[(v + t) * side + (u + t)];
          features[offset + static_cast<size_t>((u + t) * side + (v + t))] += j / marginal / 4.0;
        }
      }
    }
  }
  return features;
}

double immerkaer_sigma(const float* image, int width, int height) {
  static const Kernel kLaplacianDifference{"immerkaer", 3, 3, {1, -2, 1, -2, 4, -2, 1, -2, 1}, 1.0, false};
  const Plane r = correlate_valid(image, width, height, kLaplacianDifference);
  double sum = 0.0;
  for (float v : r.values) sum += std::fabs(v);
  return std::sqrt(std::numbers::pi / 2.0) * sum / (6.0 * (width - 2.0) * (height - 2.0));
}

void MomentSums::add(std::span<const float> values) {
  for (float v : values) {
    const double d = v;
    const double d2 = d * d;
    s1 += d;
    s2 += d2;
    s3 += d2 * d;
    s4 += d2 * d2;
  }
  count += values.size();
}

Moments MomentSums::moments() const {
  if (count == 0) return {};
  const auto n = static_cast<double>(count);
  const double mu = s1 / n;
  const double e2 = s2 / n;
  const double e3 = s3 / n;
  const double e4 = s4 / n;
  const double m2 = e2 - mu * mu;
  const double m4 = e4 - 4 * mu * e3 + 6 * mu * mu * e2 - 3 * mu * mu * mu * mu;
  return {m2, m2 > 1e-12 ? m4 / (m2 * m2) - 3.0 : 0.0};
}

Moments moments(std::span<const float> values) {
  MomentSums sums;
  sums.add(values);
  return sums.moments();
}

}  // namespace residue
