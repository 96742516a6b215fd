#include "residue/features/filters.hpp"

#include <algorithm>
#include <cmath>
#include <map>
#include <numbers>
#include <utility>

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

Plane correlate_valid(const float* image, int width, int height, const Kernel& kernel) {
  Plane out{width - kernel.width + 1, height - kernel.height + 1, {}};
  if (out.width <= 0 || out.height <= 0) return Plane{};
  out.values.assign(static_cast<size_t>(out.width) * out.height, 0.0F);
  for (int ky = 0; ky < kernel.height; ++ky) {
    for (int kx = 0; kx < kernel.width; ++kx) {
      const auto tap = static_cast<float>(kernel.taps[ky * kernel.width + kx]);
      if (tap == 0.0F) continue;
      for (int y = 0; y < out.height; ++y) {
        const float* src = image + static_cast<size_t>(y + ky) * width + kx;
        float* dst = out.values.data() + static_cast<size_t>(y) * out.width;
        for (int x = 0; x < out.width; ++x) dst[x] += tap * src[x];
      }
    }
  }
  return out;
}

namespace {

// Class index of each (a, b) in [-T, T]^2 under the sign and order symmetries, classes numbered
// in lexicographic order of their smallest member. Cheap: (2T+1)^2 entries.
std::vector<int> folded_index(int t) {
  const int side = 2 * t + 1;
  std::map<std::pair<int, int>, int> classes;
  std::vector<std::pair<int, int>> canon(static_cast<size_t>(side) * side);
  for (int a = -t; a <= t; ++a) {
    for (int b = -t; b <= t; ++b) {
      const auto key = std::min({std::pair{a, b}, std::pair{-a, -b}, std::pair{b, a}, std::pair{-b, -a}});
      canon[(a + t) * side + (b + t)] = key;
      classes.emplace(key, 0);
    }
  }
  int next = 0;
  for (auto& entry : classes) entry.second = next++;
  std::vector<int> index(canon.size());
  for (size_t i = 0; i < canon.size(); ++i) index[i] = classes[canon[i]];
  return index;
}

// Round half away from zero (as std::lround) without a library call, then truncate to [-T, T].
int round_clamped(float v, int t) {
  const float c = std::clamp(v, -static_cast<float>(t) - 1.0F, static_cast<float>(t) + 1.0F);
  return std::clamp(static_cast<int>(c >= 0 ? c + 0.5F : c - 0.5F), -t, t);
}

const std::vector<int>& folded_index_cached(int t) {
  static const std::vector<int> t2 = folded_index(2);
  static thread_local std::vector<int> other;
  if (t == 2) return t2;
  other = folded_index(t);
  return other;
}

}  // namespace

int folded_pair_classes(int t) {
  const auto index = folded_index(t);
  return *std::max_element(index.begin(), index.end()) + 1;
}

long add_folded_pairs(const Plane& residual, double step, int t, bool along_rows,
                      std::vector<double>& histogram) {
  const auto& index = folded_index_cached(t);
  const int side = 2 * t + 1;
  const int w = residual.width;
  const int h = residual.height;
  const auto inverse = static_cast<float>(1.0 / step);
  std::vector<int> q(residual.values.size());
  for (size_t i = 0; i < q.size(); ++i) q[i] = round_clamped(residual.values[i] * inverse, t);
  // Count raw pairs first, fold once at the end.
  std::vector<long> raw(static_cast<size_t>(side) * side, 0);
  long pairs = 0;
  const int dx = along_rows ? 1 : 0;
  const int dy = along_rows ? 0 : 1;
  for (int y = 0; y + dy < h; ++y) {
    const int* row = q.data() + static_cast<size_t>(y) * w;
    const int* next = row + static_cast<size_t>(dy) * w + dx;
    const int count = w - dx;
    for (int x = 0; x < count; ++x) ++raw[(row[x] + t) * side + (next[x] + t)];
    pairs += count;
  }
  for (size_t i = 0; i < raw.size(); ++i) histogram[index[i]] += static_cast<double>(raw[i]);
  return pairs;
}

std::vector<double> spam_first_order(const float* image, int width, int height, int t) {
  const int side = 2 * t + 1;
  const size_t cells = static_cast<size_t>(side) * side;
  std::vector<int> px(static_cast<size_t>(width) * height);
  for (size_t i = 0; i < px.size(); ++i) px[i] = round_clamped(image[i], 1 << 20);
  auto at = [&](int y, int x) { return px[static_cast<size_t>(y) * width + x]; };
  // Each of the four axes (rows, columns, two diagonals) is walked once, forwards: J(a, b) counts
  // consecutive truncated differences a = D(k), b = D(k+1), D(k) = I(k) - I(k+1). The backward
  // direction on the same axis sees the differences negated and in reverse order, so its
  // transitions v -> u are J(-u, -v). SPAM's eight directions come from these four counts.
  static constexpr int kAxes[4][2] = {{0, 1}, {1, 0}, {1, 1}, {1, -1}};
  std::vector<double> features(2 * cells, 0.0);
  for (int a = 0; a < 4; ++a) {
    const int dy = kAxes[a][0];
    const int dx = kAxes[a][1];
    std::vector<double> joint(cells, 0.0);
    const int x_lo = dx < 0 ? 2 : 0;
    const int x_hi = dx > 0 ? width - 2 : width;
    for (int y = 0; y + 2 * dy < height; ++y) {
      for (int x = x_lo; x < x_hi; ++x) {
        const int p0 = at(y, x);
        const int p1 = at(y + dy, x + dx);
        const int p2 = at(y + 2 * dy, x + 2 * dx);
        const int d0 = std::clamp(p0 - p1, -t, t);
        const int d1 = std::clamp(p1 - p2, -t, t);
        joint[(d0 + t) * side + (d1 + t)] += 1.0;
      }
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
