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

int quantise(float r, double step, int t) {
  const long q = std::lround(r / step);
  return static_cast<int>(std::clamp<long>(q, -t, t));
}

}  // namespace

int folded_pair_classes(int t) {
  const auto index = folded_index(t);
  return *std::max_element(index.begin(), index.end()) + 1;
}

long add_folded_pairs(const Plane& residual, double step, int t, bool along_rows,
                      std::vector<double>& histogram) {
  const auto index = folded_index(t);
  const int side = 2 * t + 1;
  const int w = residual.width;
  const int h = residual.height;
  std::vector<int> q(residual.values.size());
  for (size_t i = 0; i < q.size(); ++i) q[i] = quantise(residual.values[i], step, t);
  long pairs = 0;
  const int dx = along_rows ? 1 : 0;
  const int dy = along_rows ? 0 : 1;
  for (int y = 0; y + dy < h; ++y) {
    for (int x = 0; x + dx < w; ++x) {
      const int a = q[static_cast<size_t>(y) * w + x];
      const int b = q[static_cast<size_t>(y + dy) * w + x + dx];
      histogram[index[(a + t) * side + (b + t)]] += 1.0;
      ++pairs;
    }
  }
  return pairs;
}

std::vector<double> spam_first_order(const float* image, int width, int height, int t) {
  const int side = 2 * t + 1;
  const size_t cells = static_cast<size_t>(side) * side;
  std::vector<int> px(static_cast<size_t>(width) * height);
  for (size_t i = 0; i < px.size(); ++i) px[i] = static_cast<int>(std::lround(image[i]));
  auto at = [&](int y, int x) { return px[static_cast<size_t>(y) * width + x]; };
  // The eight directions of SPAM: right, left, down, up, then the four diagonals.
  static constexpr int kDirs[8][2] = {{0, 1}, {0, -1}, {1, 0}, {-1, 0}, {1, 1}, {-1, -1}, {1, -1}, {-1, 1}};
  std::vector<double> features(2 * cells, 0.0);
  for (int d = 0; d < 8; ++d) {
    const int dy = kDirs[d][0];
    const int dx = kDirs[d][1];
    std::vector<double> joint(cells, 0.0);
    std::vector<double> marginal(side, 0.0);
    // Needs pixels (y, x), (y+dy, x+dx), (y+2dy, x+2dx) inside the image.
    for (int y = 0; y < height; ++y) {
      const int y2 = y + 2 * dy;
      if (y2 < 0 || y2 >= height) continue;
      for (int x = 0; x < width; ++x) {
        const int x2 = x + 2 * dx;
        if (x2 < 0 || x2 >= width) continue;
        const int d0 = std::clamp(at(y, x) - at(y + dy, x + dx), -t, t);
        const int d1 = std::clamp(at(y + dy, x + dx) - at(y2, x2), -t, t);
        joint[(d1 + t) * side + (d0 + t)] += 1.0;  // (u = next, v = current)
        marginal[d0 + t] += 1.0;
      }
    }
    const size_t offset = d < 4 ? 0 : cells;
    for (int u = 0; u < side; ++u) {
      for (int v = 0; v < side; ++v) {
        const double m = marginal[v] > 0 ? joint[u * side + v] / marginal[v] : 0.0;
        features[offset + u * side + v] += m / 4.0;
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

Moments moments(std::span<const float> values) {
  if (values.empty()) return {};
  double mean = 0.0;
  for (float v : values) mean += v;
  mean /= static_cast<double>(values.size());
  double m2 = 0.0;
  double m4 = 0.0;
  for (float v : values) {
    const double d = v - mean;
    m2 += d * d;
    m4 += d * d * d * d;
  }
  m2 /= static_cast<double>(values.size());
  m4 /= static_cast<double>(values.size());
  return {m2, m2 > 1e-12 ? m4 / (m2 * m2) - 3.0 : 0.0};
}

}  // namespace residue
