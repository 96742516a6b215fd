// Noise-residual family: rich-model co-occurrences (Fridrich & Kodovsky 2012), SPAM (Pevny, Bas
// & Fridrich 2010), moments, Immerkaer (1996) noise level, CFA traces (Popescu & Farid 2005).
#include <algorithm>
#include <cmath>
#include <cstdio>

#include "residue/features/families.hpp"
#include "residue/features/filters.hpp"

namespace residue {

namespace {

constexpr int kCoocT = 2;  // truncation of the quantised residuals
constexpr int kSpamT = 2;  // truncation of the SPAM differences (the paper uses 4; see docs)
// Kernels whose residuals also give 4th-order and cross-colour co-occurrences (our choice: one
// directional and one non-directional kernel keep the vector at a size the learner handles).
bool rich_kernel(std::string_view name) { return name == "o2" || name == "kv3"; }

std::string class_label(int c) {
  char buf[16];
  std::snprintf(buf, sizeof buf, "c%03d", c);
  return buf;
}

// "m2" for -2, "p1" for +1: signs spelled out so names stay plain identifiers.
std::string signed_label(int k) {
  char buf[16];
  std::snprintf(buf, sizeof buf, "%c%d", k < 0 ? 'm' : 'p', std::abs(k));
  return buf;
}

}  // namespace

CfaTraces cfa_traces(const Tile& tile) {
  const int n = tile.size;
  const int channels = tile.channels;
  // residual of each channel on the interior, with the 2 x 2 lattice position of each sample
  std::vector<std::vector<float>> e(channels);
  CfaTraces out;
  for (int c = 0; c < channels; ++c) {
    const float* x = tile.plane(c);
    const auto width = static_cast<size_t>(n);
    const size_t inner = width - 2;
    e[c].resize(inner * inner);
    double energy[4] = {0, 0, 0, 0};
    for (int y = 1; y < n - 1; ++y) {
      float* out = e[c].data() + static_cast<size_t>(y - 1) * inner;
      const float* row = x + static_cast<size_t>(y) * width;
      const float* above = row - width;
      const float* below = row + width;
      for (size_t i = 1; i + 1 < width; ++i) {
        out[i - 1] = row[i] - 0.25F * (row[i - 1] + row[i + 1] + above[i] + below[i]);
      }
      // Each lattice position's energy summed in the same order as before (along the row).
      const size_t lattice = y % 2 == 0 ? 0 : 2;
      double even = energy[lattice];
      double odd = energy[lattice + 1];
      for (size_t i = 1; i + 1 < width; ++i) {
        const double r = out[i - 1];
        if (i % 2 == 0) {
          even += r * r;
        } else {
          odd += r * r;
        }
      }
      energy[lattice] = even;
      energy[lattice + 1] = odd;
    }
    const auto [lo, hi] = std::minmax_element(energy, energy + 4);
    out.lattice_contrast[c] = std::log10((*hi + 1e-9) / (*lo + 1e-9));
  }
  if (channels == 1) {
    out.lattice_contrast[1] = out.lattice_contrast[2] = out.lattice_contrast[0];
    return out;  // grey: the three channels are one, correlations stay 1
  }
  auto corr = [](const std::vector<float>& a, const std::vector<float>& b) {
    double sa = 0, sb = 0, saa = 0, sbb = 0, sab = 0;
    const auto m = static_cast<double>(a.size());
    for (size_t i = 0; i < a.size(); ++i) {
      sa += a[i];
      sb += b[i];
      saa += static_cast<double>(a[i]) * a[i];
      sbb += static_cast<double>(b[i]) * b[i];
      sab += static_cast<double>(a[i]) * b[i];
    }
    const double va = saa - sa * sa / m;
    const double vb = sbb - sb * sb / m;
    return va > 1e-9 && vb > 1e-9 ? (sab - sa * sb / m) / std::sqrt(va * vb) : 1.0;
  };
  out.residual_corr_rg = corr(e[0], e[1]);
  out.residual_corr_bg = corr(e[2], e[1]);
  return out;
}

double WindowInput::luma_noise_sigma() const {
  if (!luma_noise_sigma_kept) luma_noise_sigma_kept = immerkaer_sigma(luma.data(), tile.size, tile.size);
  return *luma_noise_sigma_kept;
}

const std::vector<std::string>& noise_names() {
  static const std::vector<std::string> names = [] {
    std::vector<std::string> v;
    const int classes = folded_pair_classes(kCoocT);
    for (const auto& k : rich_model_kernels()) {
      for (int c = 0; c < classes; ++c)
        v.push_back("noise.cooc_" + std::string(k.name) + ".c" + std::to_string(c));
    }
    for (const char* group : {"straight", "diagonal"}) {
      for (int u = -kSpamT; u <= kSpamT; ++u) {
        for (int w = -kSpamT; w <= kSpamT; ++w) {
          v.push_back(std::string("noise.spam_") + group + ".u" + signed_label(u) + "_v" + signed_label(w));
        }
      }
    }
    for (const auto& k : rich_model_kernels()) {
      for (int c = 0; c < folded_tuple_classes(kCoocT, 3, true); ++c)
        v.push_back("noise.cooc3_" + std::string(k.name) + "." + class_label(c));
      if (!rich_kernel(k.name)) continue;
      for (int c = 0; c < folded_tuple_classes(kCoocT, 4, true); ++c)
        v.push_back("noise.cooc4_" + std::string(k.name) + "." + class_label(c));
    }
    for (const auto& k : rich_model_kernels()) {
      if (!rich_kernel(k.name)) continue;
      for (int c = 0; c < folded_tuple_classes(kCoocT, 3, false); ++c)
        v.push_back("noise.cross_" + std::string(k.name) + "." + class_label(c));
    }
    for (const auto& k : rich_model_kernels()) {
      v.push_back("noise.moments_" + std::string(k.name) + ".log_variance");
      v.push_back("noise.moments_" + std::string(k.name) + ".log_kurtosis");
    }
    v.emplace_back("noise.level.immerkaer_sigma");
    v.emplace_back("noise.cfa.lattice_contrast_r");
    v.emplace_back("noise.cfa.lattice_contrast_g");
    v.emplace_back("noise.cfa.lattice_contrast_b");
    v.emplace_back("noise.cfa.residual_corr_rg");
    v.emplace_back("noise.cfa.residual_corr_bg");
    return v;
  }();
  return names;
}

std::vector<double> noise_window(const WindowInput& window) {
  const int n = window.tile.size;
  const float* y = window.luma.data();
  std::vector<double> values;
  values.reserve(noise_names().size());
  std::vector<Moments> kernel_moments;

  std::vector<double> higher;  // 3rd- and 4th-order values, after SPAM in the vector
  auto normalised = [](const std::vector<double>& histogram, long count, std::vector<double>& out) {
    for (double c : histogram) out.push_back(count > 0 ? c / static_cast<double>(count) : 0.0);
  };
  for (const auto& k : rich_model_kernels()) {
    MomentSums sums;
    const Plane h = correlate_valid(y, n, n, k);
    sums.add(h.values);
    // Directional kernels: horizontal kernel with tuples along rows, vertical kernel along
    // columns; the others along rows and columns of the one plane.
    const Plane v = k.directional ? correlate_valid(y, n, n, k.transposed()) : Plane{};
    if (k.directional) sums.add(v.values);
    const QuantisedPlane qh = quantise(h, k.step, kCoocT);
    const QuantisedPlane qv = k.directional ? quantise(v, k.step, kCoocT) : QuantisedPlane{};
    const QuantisedPlane& second = k.directional ? qv : qh;
    // Pairs, triples and (rich kernels) quadruples, each direction in one pass.
    const int top = rich_kernel(k.name) ? 4 : 3;
    std::vector<std::vector<double>> histograms;
    for (int order = 2; order <= top; ++order)
      histograms.emplace_back(static_cast<size_t>(folded_tuple_classes(kCoocT, order, true)), 0.0);
    const auto along_rows = add_folded_tuple_orders(qh, true, histograms);
    const auto along_columns = add_folded_tuple_orders(second, false, histograms);
    normalised(histograms[0], along_rows[0] + along_columns[0], values);
    kernel_moments.push_back(sums.moments());
    for (int order = 3; order <= top; ++order) {
      normalised(histograms[order - 2], along_rows[order - 2] + along_columns[order - 2], higher);
    }
  }
  const auto spam = spam_first_order(y, n, n, kSpamT);
  values.insert(values.end(), spam.begin(), spam.end());
  values.insert(values.end(), higher.begin(), higher.end());
  // Cross-colour triples of each channel's residual (grey: the one channel three times).
  for (const auto& k : rich_model_kernels()) {
    if (!rich_kernel(k.name)) continue;
    std::vector<double> histogram(static_cast<size_t>(folded_tuple_classes(kCoocT, 3, false)), 0.0);
    long count = 0;
    for (const Kernel& kernel :
         k.directional ? std::vector<Kernel>{k, k.transposed()} : std::vector<Kernel>{k}) {
      QuantisedPlane planes[3];
      for (int c = 0; c < 3; ++c) {
        const float* x = window.tile.plane(std::min(c, window.tile.channels - 1));
        planes[c] = quantise(correlate_valid(x, n, n, kernel), k.step, kCoocT);
      }
      count += add_cross_channel_triples(planes[0], planes[1], planes[2], histogram);
    }
    normalised(histogram, count, values);
  }
  for (const auto& m : kernel_moments) {
    values.push_back(std::log10(m.variance + 1e-6));
    values.push_back(std::log10(m.excess_kurtosis + 3.0));  // log of the (non-excess) kurtosis, >= 0
  }
  values.push_back(window.luma_noise_sigma());
  const CfaTraces cfa = cfa_traces(window.tile);
  values.insert(values.end(), {cfa.lattice_contrast[0], cfa.lattice_contrast[1], cfa.lattice_contrast[2],
                               cfa.residual_corr_rg, cfa.residual_corr_bg});
  return values;
}

}  // namespace residue
