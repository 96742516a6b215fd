// Texture contrast of the residual (Zhong et al. 2023): residual statistics of the texture-poorest
// and texture-richest patches of a window. See families.hpp and docs/features.md.
#include <algorithm>
#include <cmath>
#include <numeric>

#include "residue/features/families.hpp"
#include "residue/features/filters.hpp"

namespace residue {

namespace {

constexpr int kPatch = 32;
constexpr int kCoocT = 2;

// The second-order rich-model kernel [1, -2, 1] (step 2), applied along rows and columns.
const Kernel& second_order() {
  static const Kernel k = rich_model_kernels()[1];
  return k;
}

struct GroupStatistics {
  std::vector<double> cooc;
  double log_variance = 0.0;
  double log_kurtosis = 0.0;
};

GroupStatistics group_statistics(const float* luma, int n, const std::vector<int>& patches) {
  const int per_row = n / kPatch;
  std::vector<double> histogram(static_cast<size_t>(folded_pair_classes(kCoocT)), 0.0);
  long pairs = 0;
  MomentSums sums;
  std::vector<float> patch(static_cast<size_t>(kPatch) * kPatch);
  const Kernel& k = second_order();
  const Kernel kt = k.transposed();
  for (int p : patches) {
    const int y0 = (p / per_row) * kPatch;
    const int x0 = (p % per_row) * kPatch;
    for (int y = 0; y < kPatch; ++y)
      std::copy_n(luma + static_cast<size_t>(y0 + y) * n + x0, kPatch,
                  patch.data() + static_cast<size_t>(y) * kPatch);
    const Plane h = correlate_valid(patch.data(), kPatch, kPatch, k);
    const Plane v = correlate_valid(patch.data(), kPatch, kPatch, kt);
    sums.add(h.values);
    sums.add(v.values);
    pairs += add_folded_pairs(h, k.step, kCoocT, true, histogram);
    pairs += add_folded_pairs(v, k.step, kCoocT, false, histogram);
  }
  GroupStatistics out;
  for (double c : histogram) out.cooc.push_back(pairs > 0 ? c / static_cast<double>(pairs) : 0.0);
  const Moments m = sums.moments();
  out.log_variance = std::log10(m.variance + 1e-6);
  out.log_kurtosis = std::log10(m.excess_kurtosis + 3.0);
  return out;
}

}  // namespace

double texture_diversity(const float* x, int stride, int size) {
  double sum = 0.0;
  for (int y = 0; y < size; ++y) {
    const float* row = x + static_cast<size_t>(y) * stride;
    for (int i = 0; i + 1 < size; ++i) sum += std::fabs(row[i] - row[i + 1]);
    if (y + 1 == size) break;
    const float* below = row + stride;
    for (int i = 0; i < size; ++i) {
      sum += std::fabs(row[i] - below[i]);
      if (i + 1 < size) sum += std::fabs(row[i] - below[i + 1]) + std::fabs(below[i] - row[i + 1]);
    }
  }
  return sum;
}

std::vector<int> patches_by_texture(const float* luma, int n, int patch, std::vector<double>* diversity) {
  const int per_row = n / patch;
  std::vector<double> d(static_cast<size_t>(per_row) * per_row);
  for (int py = 0; py < per_row; ++py) {
    for (int px = 0; px < per_row; ++px) {
      d[static_cast<size_t>(py) * per_row + px] = texture_diversity(
          luma + static_cast<size_t>(py) * patch * n + static_cast<size_t>(px) * patch, n, patch);
    }
  }
  std::vector<int> order(d.size());
  std::iota(order.begin(), order.end(), 0);
  std::stable_sort(order.begin(), order.end(), [&](int a, int b) { return d[a] < d[b]; });
  if (diversity != nullptr) *diversity = std::move(d);
  return order;
}

const std::vector<std::string>& texture_names() {
  static const std::vector<std::string> names = [] {
    std::vector<std::string> v;
    const int classes = folded_pair_classes(kCoocT);
    for (const char* group : {"poor", "rich"}) {
      for (int c = 0; c < classes; ++c)
        v.push_back(std::string("texture.") + group + ".cooc_o2.c" + std::to_string(c));
      v.push_back(std::string("texture.") + group + ".log_variance");
      v.push_back(std::string("texture.") + group + ".log_kurtosis");
    }
    v.emplace_back("texture.contrast.log_variance");
    v.emplace_back("texture.contrast.log_kurtosis");
    v.emplace_back("texture.contrast.log_diversity");
    return v;
  }();
  return names;
}

std::vector<double> texture_window(const WindowInput& window) {
  const int n = window.tile.size;
  std::vector<double> diversity;
  const auto order = patches_by_texture(window.luma.data(), n, kPatch, &diversity);
  const size_t third = std::max<size_t>(1, order.size() / 3);
  const std::vector<int> poor(order.begin(), order.begin() + static_cast<std::ptrdiff_t>(third));
  const std::vector<int> rich(order.end() - static_cast<std::ptrdiff_t>(third), order.end());
  const GroupStatistics p = group_statistics(window.luma.data(), n, poor);
  const GroupStatistics r = group_statistics(window.luma.data(), n, rich);
  double d_poor = 0.0, d_rich = 0.0;
  for (int i : poor) d_poor += diversity[static_cast<size_t>(i)];
  for (int i : rich) d_rich += diversity[static_cast<size_t>(i)];
  std::vector<double> values;
  values.reserve(texture_names().size());
  for (const GroupStatistics* g : {&p, &r}) {
    values.insert(values.end(), g->cooc.begin(), g->cooc.end());
    values.push_back(g->log_variance);
    values.push_back(g->log_kurtosis);
  }
  values.push_back(r.log_variance - p.log_variance);
  values.push_back(r.log_kurtosis - p.log_kurtosis);
  values.push_back(std::log10((d_rich + 1.0) / (d_poor + 1.0)));
  return values;
}

}  // namespace residue
