// Spectral-residual family (Durall et al. 2020; Dzanic et al. 2020; Corvi et al. 2023).
#include <algorithm>
#include <array>
#include <cmath>
#include <cstdio>

#include "adapters.hpp"
#include "residue/features/families.hpp"
#include "residue/features/spectrum.hpp"

namespace residue {

namespace {

constexpr int kRings = 24;
constexpr double kDecayFrom = 0.25;  // cycles/pixel: the fit covers the upper half of the band
constexpr int kPeriods[] = {2, 4, 8};
constexpr int kPeakSegment = 64;  // Welch segment for the peak measures: N/8 is bin 8
constexpr double kTiny = 1e-12;

}  // namespace

std::vector<float> denoise_residual(const float* luma, int n) {
  std::vector<float> smooth(static_cast<size_t>(n) * n);
  detail::median3(luma, smooth.data(), n, n);
  for (size_t i = 0; i < smooth.size(); ++i) smooth[i] = luma[i] - smooth[i];
  return smooth;
}

double peak_to_background(const std::vector<double>& power, int n, int u, int v) {
  double ring[40];
  int k = 0;
  for (int dv = -3; dv <= 3; ++dv) {
    for (int du = -3; du <= 3; ++du) {
      if (std::abs(du) <= 1 && std::abs(dv) <= 1) continue;
      ring[k++] = power[static_cast<size_t>(((v + dv) % n + n) % n) * n + ((u + du) % n + n) % n];
    }
  }
  std::nth_element(ring, ring + 20, ring + 40);
  const double median = 0.5 * (ring[20] + *std::max_element(ring, ring + 20));
  return (power[static_cast<size_t>(v) * n + u] + kTiny) / (median + kTiny);
}

GridPeaks grid_peaks(const std::vector<double>& power, int n, int period) {
  const int step = n / period;
  double axis = 0.0;
  double diag = 0.0;
  int n_axis = 0;
  int n_diag = 0;
  for (int a = 0; a < period; ++a) {
    for (int b = 0; b < period; ++b) {
      if (a == 0 && b == 0) continue;
      if (period > 2 && a % 2 == 0 && b % 2 == 0) continue;  // on the coarser grid
      const double r = peak_to_background(power, n, a * step, b * step);
      if (a == 0 || b == 0) {
        axis += r;
        ++n_axis;
      } else {
        diag += r;
        ++n_diag;
      }
    }
  }
  return {axis / n_axis, diag / n_diag};
}

const std::vector<std::string>& spectral_names() {
  static const std::vector<std::string> names = [] {
    std::vector<std::string> v;
    char buf[64];
    for (int b = 0; b < kRings; ++b) {
      std::snprintf(buf, sizeof buf, "spectral.azimuthal.r%02d", b);
      v.emplace_back(buf);
    }
    v.emplace_back("spectral.decay.exponent");
    v.emplace_back("spectral.decay.level_at_nyquist");
    v.emplace_back("spectral.decay.fit_rmse");
    for (int p : kPeriods) {
      v.push_back("spectral.grid_n" + std::to_string(p) + ".axis.peak");
      v.push_back("spectral.grid_n" + std::to_string(p) + ".diagonal.peak");
    }
    for (const char* chroma : {"cb", "cr"}) {
      const std::string prefix = std::string("spectral.chroma_") + chroma;
      v.push_back(prefix + ".decay.exponent");
      v.push_back(prefix + ".decay.level_at_nyquist");
      v.push_back(prefix + ".decay.fit_rmse");
      for (int p : kPeriods) {
        v.push_back(prefix + ".grid_n" + std::to_string(p) + ".axis.peak");
        v.push_back(prefix + ".grid_n" + std::to_string(p) + ".diagonal.peak");
      }
    }
    return v;
  }();
  return names;
}

namespace {

// Decay fit and grid peaks of one plane's residual, appended to `values`, after the azimuthal rings
// when `with_rings` (the luma plane).
void spectral_plane(const float* plane, int n, std::vector<double>& values, bool with_rings) {
  const auto residual = denoise_residual(plane, n);
  const auto power = hann_power_spectrum(residual.data(), n);
  const auto rings = azimuthal_average(power, n, kRings);
  // Shape of the spectrum: each ring relative to the mean over all rings, log10.
  double mean = 0.0;
  for (double r : rings) mean += r;
  mean /= kRings;
  std::vector<double> log_rings(kRings);
  for (int b = 0; b < kRings; ++b) {
    log_rings[b] = std::log10((rings[b] + kTiny) / (mean + kTiny));
    if (with_rings) values.push_back(log_rings[b]);
  }
  // Least-squares line log10 P = a + s log10 f over the rings centred in [0.25, 0.5).
  double sx = 0, sy = 0, sxx = 0, sxy = 0;
  int m = 0;
  std::vector<std::pair<double, double>> points;
  for (int b = 0; b < kRings; ++b) {
    const double f = (b + 0.5) * 0.5 / kRings;
    if (f < kDecayFrom) continue;
    const double x = std::log10(f);
    points.emplace_back(x, log_rings[b]);
    sx += x;
    sy += log_rings[b];
    sxx += x * x;
    sxy += x * log_rings[b];
    ++m;
  }
  const double slope = (m * sxy - sx * sy) / (m * sxx - sx * sx);
  const double intercept = (sy - slope * sx) / m;
  double sse = 0.0;
  for (const auto& [x, y] : points) sse += std::pow(y - (intercept + slope * x), 2);
  values.push_back(slope);
  values.push_back(intercept + slope * std::log10(0.5));
  values.push_back(std::sqrt(sse / m));
  // Peaks are measured on the spectrum of the residual's magnitude: an additive periodic pattern
  // (transposed convolution) and a periodic variance (interpolation) both show there as points.
  std::vector<float> magnitude(residual.size());
  double mean_magnitude = 0.0;
  for (float r : residual) mean_magnitude += std::fabs(r);
  mean_magnitude /= static_cast<double>(residual.size());
  for (size_t i = 0; i < residual.size(); ++i) {
    magnitude[i] = std::fabs(residual[i]) - static_cast<float>(mean_magnitude);
  }
  const int segment = std::min(kPeakSegment, n);
  const auto flat = flatten_axis_ridges(welch_power_spectrum(magnitude.data(), n, segment), segment);
  for (int p : kPeriods) {
    const GridPeaks g = grid_peaks(flat, segment, p);
    values.push_back(std::log10(g.axis));
    values.push_back(std::log10(g.diagonal));
  }
}

}  // namespace

std::array<std::vector<float>, 2> chroma_planes(const Tile& tile) {
  const size_t count = static_cast<size_t>(tile.size) * tile.size;
  std::array<std::vector<float>, 2> out{std::vector<float>(count, 128.0F), std::vector<float>(count, 128.0F)};
  if (tile.channels < 3) return out;  // grey: no chroma
  const float* r = tile.plane(0);
  const float* g = tile.plane(1);
  const float* b = tile.plane(2);
  for (size_t i = 0; i < count; ++i) {
    out[0][i] = 128.0F - 0.168736F * r[i] - 0.331264F * g[i] + 0.5F * b[i];
    out[1][i] = 128.0F + 0.5F * r[i] - 0.418688F * g[i] - 0.081312F * b[i];
  }
  return out;
}

std::vector<double> spectral_window(const WindowInput& window) {
  const int n = window.tile.size;
  std::vector<double> values;
  values.reserve(spectral_names().size());
  spectral_plane(window.luma.data(), n, values, true);
  for (const auto& plane : chroma_planes(window.tile)) spectral_plane(plane.data(), n, values, false);
  return values;
}

}  // namespace residue
