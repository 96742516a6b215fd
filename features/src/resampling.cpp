// Resampling family: Kirchner (2008) fixed-predictor p-map and the peak strength of its spectrum.
#include <algorithm>
#include <cmath>

#include "residue/features/families.hpp"
#include "residue/features/spectrum.hpp"

namespace residue {

namespace {

constexpr double kMinFrequency = 0.05;  // cycles/pixel; below, scene content dominates the p-map
// e^-104 = 6.8e-46 is below half the smallest float denormal (1.4e-45): expf(-x) is exactly 0 for
// x >= 104 in round-to-nearest (IEEE 754; checked against the C library in test_resampling).
constexpr float kExpUnderflow = 104.0F;

}  // namespace

std::vector<float> kirchner_pmap(const float* luma, int n) {
  // Kirchner's preset predictor: 0.5 for the 4-neighbours, -0.25 for the diagonals.
  std::vector<float> p(static_cast<size_t>(n) * n);
  auto at = [&](int y, int x) {
    return luma[static_cast<size_t>(std::clamp(y, 0, n - 1)) * n + std::clamp(x, 0, n - 1)];
  };
  for (int y = 0; y < n; ++y) {
    for (int x = 0; x < n; ++x) {
      const float predicted =
          0.5F * (at(y - 1, x) + at(y + 1, x) + at(y, x - 1) + at(y, x + 1)) -
          0.25F * (at(y - 1, x - 1) + at(y - 1, x + 1) + at(y + 1, x - 1) + at(y + 1, x + 1));
      const float e = at(y, x) - predicted;
      // lambda = 1, sigma = 1, tau = 2. Past kExpUnderflow, expf's result rounds to zero: say so
      // directly rather than take the C library's slow underflow path for every strong edge.
      const float energy = e * e;
      p[static_cast<size_t>(y) * n + x] = energy >= kExpUnderflow ? 0.0F : std::exp(-energy);
    }
  }
  return p;
}

std::vector<float> centred_kirchner_pmap(const float* luma, int n) {
  auto p = kirchner_pmap(luma, n);
  double mean = 0.0;
  for (float v : p) mean += v;
  mean /= static_cast<double>(p.size());
  for (float& v : p) v -= static_cast<float>(mean);
  return p;
}

std::vector<double> axis_profile(const std::vector<double>& power, int n) {
  std::vector<double> profile(static_cast<size_t>(n / 2) + 1);
  for (int k = 0; k <= n / 2; ++k) {
    double s = 0.0;
    for (int j = 0; j < n; ++j) {
      s += power[static_cast<size_t>(j) * n + k] + power[static_cast<size_t>(k) * n + j];
    }
    profile[static_cast<size_t>(k)] = s / (2.0 * n);
  }
  return profile;
}

SpectralPeak profile_peak(const std::vector<double>& profile, int n, double min_frequency) {
  const int k_min = std::max(1, static_cast<int>(std::ceil(min_frequency * n)));
  const auto band = profile.begin() + k_min;
  const auto peak = std::max_element(band, profile.end());
  std::vector<double> sorted(band, profile.end());
  std::nth_element(sorted.begin(), sorted.begin() + static_cast<std::ptrdiff_t>(sorted.size() / 2),
                   sorted.end());
  const double median = sorted[sorted.size() / 2];
  return {(*peak + 1e-12) / (median + 1e-12), static_cast<double>(peak - profile.begin()) / n};
}

SpectralPeak projected_peak(const std::vector<double>& power, int n, double min_frequency) {
  return profile_peak(axis_profile(power, n), n, min_frequency);
}

const std::vector<std::string>& resampling_names() {
  static const std::vector<std::string> names = {"resampling.pmap.projected.peak",
                                                 "resampling.pmap.grid_n8.peak"};
  return names;
}

std::vector<double> pmap_power(const WindowInput& window) {
  return hann_power_spectrum(centred_kirchner_pmap(window.luma.data(), window.tile.size).data(),
                             window.tile.size);
}

const std::vector<double>& WindowInput::pmap_profile() const {
  if (pmap_profile_kept.empty()) pmap_profile_kept = axis_profile(pmap_power(*this), tile.size);
  return pmap_profile_kept;
}

std::vector<double> resampling_window(const WindowInput& window) {
  const int n = window.tile.size;
  const auto power = pmap_power(window);
  window.pmap_profile_kept = axis_profile(power, n);
  const SpectralPeak peak = profile_peak(window.pmap_profile_kept, n, kMinFrequency);
  // JPEG's 8 x 8 blocks and 8x upsampling leave p-map periodicity at multiples of 1/8.
  const GridPeaks grid = grid_peaks(power, n, 8);
  return {std::log10(peak.ratio), std::log10(0.5 * (grid.axis + grid.diagonal))};
}

}  // namespace residue
