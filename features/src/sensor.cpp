// Sensor noise level function (Foi et al. 2008; Liu et al. 2008): how the noise variance of each
// colour channel grows with intensity. See families.hpp and docs/features.md.
#include <algorithm>
#include <cmath>
#include <numbers>

#include "residue/features/families.hpp"
#include "residue/features/filters.hpp"

namespace residue {

namespace {

constexpr int kBlock = 8;      // block side, in filtered samples
constexpr int kBinWidth = 16;  // intensity levels per bin
constexpr int kBins = 256 / kBinWidth;
constexpr int kMinBlocksPerBin = 6;  // fewer blocks give no reliable median (our choice)
constexpr double kTinyVariance = 1e-3;

double median_of(std::vector<double> v) {
  const size_t mid = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(mid), v.end());
  if (v.size() % 2 == 1) return v[mid];
  return 0.5 * (v[mid] + *std::max_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(mid)));
}

}  // namespace

NoiseLevelCurve noise_level_function(const float* plane, int n) {
  static const Kernel kLaplacianDifference{"immerkaer", 3, 3, {1, -2, 1, -2, 4, -2, 1, -2, 1}, 1.0, false};
  const Plane r = correlate_valid(plane, n, n, kLaplacianDifference);
  std::vector<std::vector<double>> variances(kBins);
  std::vector<double> intensity_sum(kBins, 0.0);
  const double to_sigma = std::sqrt(std::numbers::pi / 2.0) / 6.0;
  for (int by = 0; by + kBlock <= r.height; by += kBlock) {
    for (int bx = 0; bx + kBlock <= r.width; bx += kBlock) {
      double abs_sum = 0.0;
      double level = 0.0;
      for (int y = 0; y < kBlock; ++y) {
        const float* rr = r.values.data() + static_cast<size_t>(by + y) * r.width + bx;
        const float* px =
            plane + static_cast<size_t>(by + y + 1) * n + bx + 1;  // filtered (y, x) is pixel (y+1, x+1)
        for (int x = 0; x < kBlock; ++x) {
          abs_sum += std::fabs(rr[x]);
          level += px[x];
        }
      }
      level /= kBlock * kBlock;
      const double sigma = to_sigma * abs_sum / (kBlock * kBlock);
      const int bin = std::clamp(static_cast<int>(level) / kBinWidth, 0, kBins - 1);
      if (bin == 0 || bin == kBins - 1) continue;  // clipped near black and white
      variances[bin].push_back(sigma * sigma);
      intensity_sum[bin] += level;
    }
  }
  NoiseLevelCurve curve;
  for (int b = 0; b < kBins; ++b) {
    if (variances[b].size() < kMinBlocksPerBin) continue;
    curve.intensity.push_back(intensity_sum[b] / static_cast<double>(variances[b].size()));
    curve.variance.push_back(median_of(variances[b]));
  }
  const size_t m = curve.intensity.size();
  if (m == 0) return curve;
  if (m == 1) {
    curve.offset = curve.variance[0];
    return curve;
  }
  // Theil-Sen line: the median of the pairwise slopes, then the median of v - a mu; Kendall's tau
  // from the same pairs (bins are in increasing intensity).
  std::vector<double> slopes;
  int concordant = 0;
  int discordant = 0;
  for (size_t i = 0; i < m; ++i) {
    for (size_t j = i + 1; j < m; ++j) {
      slopes.push_back((curve.variance[j] - curve.variance[i]) / (curve.intensity[j] - curve.intensity[i]));
      concordant += curve.variance[j] > curve.variance[i];
      discordant += curve.variance[j] < curve.variance[i];
    }
  }
  curve.slope = median_of(slopes);
  std::vector<double> offsets(m);
  for (size_t i = 0; i < m; ++i) offsets[i] = curve.variance[i] - curve.slope * curve.intensity[i];
  curve.offset = median_of(offsets);
  double sse = 0.0;
  double mean_v = 0.0;
  for (size_t i = 0; i < m; ++i) {
    sse += std::pow(curve.variance[i] - (curve.slope * curve.intensity[i] + curve.offset), 2);
    mean_v += curve.variance[i] / static_cast<double>(m);
  }
  curve.relative_rmse = std::sqrt(sse / static_cast<double>(m)) / (mean_v + kTinyVariance);
  curve.kendall_tau = static_cast<double>(concordant - discordant) / static_cast<double>(slopes.size());
  return curve;
}

const std::vector<std::string>& sensor_names() {
  static const std::vector<std::string> names = [] {
    std::vector<std::string> v;
    for (const char* c : {"r", "g", "b"}) {
      for (const char* value : {"slope", "offset", "fit_rmse", "monotonic"})
        v.push_back(std::string("sensor.nlf_") + c + "." + value);
    }
    v.emplace_back("sensor.nlf.channel_spread");
    v.emplace_back("sensor.nlf.log_level_mid");
    return v;
  }();
  return names;
}

std::vector<double> sensor_window(const WindowInput& window) {
  const Tile& tile = window.tile;
  std::vector<NoiseLevelCurve> curves;
  curves.reserve(3);
  for (int c = 0; c < tile.channels; ++c) curves.push_back(noise_level_function(tile.plane(c), tile.size));
  while (curves.size() < 3) curves.push_back(curves.front());  // grey: one curve for all three
  std::vector<double> values;
  values.reserve(sensor_names().size());
  double level = 0.0;
  for (const auto& k : curves) {
    values.insert(values.end(), {k.slope, k.offset, k.relative_rmse, k.kendall_tau});
    level += std::log10(std::max(k.slope * 128.0 + k.offset, kTinyVariance)) / 3.0;
  }
  // Spread between channels: over the bins every channel has, the standard deviation of
  // log10 variance across the three channels, averaged.
  double spread = 0.0;
  int common = 0;
  for (size_t i = 0; i < curves[0].intensity.size(); ++i) {
    double logs[3];
    bool all = true;
    for (int c = 0; c < 3 && all; ++c) {
      const auto& k = curves[static_cast<size_t>(c)];
      const auto it = std::find_if(k.intensity.begin(), k.intensity.end(), [&](double mu) {
        return static_cast<int>(mu) / kBinWidth == static_cast<int>(curves[0].intensity[i]) / kBinWidth;
      });
      all = it != k.intensity.end();
      if (all)
        logs[c] = std::log10(k.variance[static_cast<size_t>(it - k.intensity.begin())] + kTinyVariance);
    }
    if (!all) continue;
    const double mean = (logs[0] + logs[1] + logs[2]) / 3.0;
    spread += std::sqrt(
        (std::pow(logs[0] - mean, 2) + std::pow(logs[1] - mean, 2) + std::pow(logs[2] - mean, 2)) / 3.0);
    ++common;
  }
  values.push_back(common > 0 ? spread / common : 0.0);
  values.push_back(level);
  return values;
}

}  // namespace residue
