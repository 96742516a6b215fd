// FFTW adapter: the only file that includes fftw3.h.
#include <fftw3.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <memory>
#include <mutex>
#include <numbers>

#include "residue/features/spectrum.hpp"
#include "residue/features/vector_clones.hpp"

namespace residue {

namespace {

struct FftwFree {
  void operator()(void* p) const { fftw_free(p); }
};
using RealBuffer = std::unique_ptr<double[], FftwFree>;
using ComplexBuffer = std::unique_ptr<fftw_complex[], FftwFree>;

RealBuffer alloc_real(size_t n) { return RealBuffer(fftw_alloc_real(n)); }
ComplexBuffer alloc_complex(size_t n) { return ComplexBuffer(fftw_alloc_complex(n)); }

// Plans by size. The FFTW planner is not thread-safe; executing a plan on new arrays is (FFTW
// manual 5.4). Plans live until exit, when they are destroyed so leak checkers stay quiet.
class PlanCache {
 public:
  ~PlanCache() {
    for (auto& [n, plan] : plans_) fftw_destroy_plan(plan);
    fftw_cleanup();
  }
  fftw_plan get(int n) {
    std::lock_guard lock(mutex_);
    auto it = plans_.find(n);
    if (it != plans_.end()) return it->second;
    auto in = alloc_real(static_cast<size_t>(n) * n);
    auto out = alloc_complex(static_cast<size_t>(n) * (n / 2 + 1));
    fftw_plan plan = fftw_plan_dft_r2c_2d(n, n, in.get(), out.get(), FFTW_ESTIMATE);
    plans_.emplace(n, plan);
    return plan;
  }

 private:
  std::mutex mutex_;
  std::map<int, fftw_plan> plans_;
};

fftw_plan plan_for(int n) {
  static PlanCache cache;
  return cache.get(n);
}

const std::vector<double>& hann(int n) {
  static std::mutex mutex;
  static std::map<int, std::vector<double>> windows;
  std::lock_guard lock(mutex);
  auto& w = windows[n];
  if (w.empty()) {
    w.resize(n);
    for (int k = 0; k < n; ++k) w[k] = 0.5 - 0.5 * std::cos(2.0 * std::numbers::pi * k / n);
  }
  return w;
}

}  // namespace

namespace {

// FFTW's input and output arrays of one thread, kept between calls (one spectrum per window and
// plane would otherwise allocate and fault in about 1 MB each time). fftw_malloc gives the
// alignment the plans were made with, so any such array may be passed to them.
struct Scratch {
  size_t real_size = 0;
  size_t complex_size = 0;
  RealBuffer in;
  ComplexBuffer out;
  void reserve(size_t real, size_t complex) {
    if (real > real_size) {
      in = alloc_real(real);
      real_size = real;
    }
    if (complex > complex_size) {
      out = alloc_complex(complex);
      complex_size = complex;
    }
  }
};

// The radial bin of every cell of an n x n spectrum (-1 beyond the Nyquist circle), by (n, bins).
const std::vector<int>& radial_bins(int n, int bins) {
  static std::mutex mutex;
  static std::map<std::pair<int, int>, std::vector<int>> tables;
  std::lock_guard lock(mutex);
  auto [it, added] = tables.try_emplace({n, bins});
  if (added) {
    it->second.assign(static_cast<size_t>(n) * n, -1);
    for (int v = 0; v < n; ++v) {
      const double fv = dft_frequency(v, n);
      for (int u = 0; u < n; ++u) {
        const double fu = dft_frequency(u, n);
        const double r = std::sqrt(fu * fu + fv * fv);
        if (r < 0.5) it->second[static_cast<size_t>(v) * n + u] = static_cast<int>(r / 0.5 * bins);
      }
    }
  }
  return it->second;  // map nodes never move
}

}  // namespace

RESIDUE_VECTOR_CLONES std::vector<double> hann_power_spectrum(const float* image, int n) {
  const auto& w = hann(n);
  const size_t nn = static_cast<size_t>(n) * n;
  const int half = n / 2 + 1;
  thread_local Scratch scratch;
  scratch.reserve(nn, static_cast<size_t>(n) * half);
  double* in = scratch.in.get();
  const fftw_complex* out = scratch.out.get();
  double w1 = 0.0;
  for (int k = 0; k < n; ++k) w1 += w[k] * w[k];
  const double norm = 1.0 / (w1 * w1);  // sum over the 2-D window of w(x)^2 w(y)^2
  for (int y = 0; y < n; ++y) {
    for (int x = 0; x < n; ++x) in[y * n + x] = w[y] * w[x] * image[y * n + x];
  }
  fftw_execute_dft_r2c(plan_for(n), in, scratch.out.get());
  std::vector<double> power(nn);
  for (int v = 0; v < n; ++v) {
    const int mirror_v = v == 0 ? 0 : n - v;  // (n - v) mod n
    double* row = power.data() + static_cast<size_t>(v) * n;
    double* mirror_row = power.data() + static_cast<size_t>(mirror_v) * n;
    const fftw_complex* z = out + static_cast<size_t>(v) * half;
    for (int u = 0; u < half; ++u) row[u] = (z[u][0] * z[u][0] + z[u][1] * z[u][1]) * norm;
    // Hermitian symmetry of a real input: P(-u, -v) = P(u, v).
    mirror_row[0] = row[0];
    for (int u = 1; u < half; ++u) mirror_row[n - u] = row[u];
  }
  return power;
}

std::vector<double> welch_power_spectrum(const float* image, int n, int segment) {
  const size_t ss = static_cast<size_t>(segment) * segment;
  std::vector<double> sum(ss, 0.0);
  std::vector<float> block(ss);
  const int hop = segment;
  int count = 0;
  for (int y0 = 0; y0 + segment <= n; y0 += hop) {
    for (int x0 = 0; x0 + segment <= n; x0 += hop) {
      for (int y = 0; y < segment; ++y) {
        std::copy_n(image + static_cast<size_t>(y0 + y) * n + x0, segment,
                    block.data() + static_cast<size_t>(y) * segment);
      }
      const auto p = hann_power_spectrum(block.data(), segment);
      for (size_t i = 0; i < ss; ++i) sum[i] += p[i];
      ++count;
    }
  }
  for (double& v : sum) v /= count;
  return sum;
}

std::vector<double> flatten_axis_ridges(const std::vector<double>& power, int n) {
  auto median = [](std::vector<double> v) {
    std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(v.size() / 2), v.end());
    return v[v.size() / 2];
  };
  std::vector<double> row_median(n);
  std::vector<double> col_median(n);
  std::vector<double> line(n);
  for (int v = 0; v < n; ++v) {
    std::copy_n(power.begin() + static_cast<std::ptrdiff_t>(v) * n, n, line.begin());
    row_median[v] = median(line);
  }
  for (int u = 0; u < n; ++u) {
    for (int v = 0; v < n; ++v) line[v] = power[static_cast<size_t>(v) * n + u];
    col_median[u] = median(line);
  }
  const double overall = median(power);
  std::vector<double> out(power.size());
  for (int v = 0; v < n; ++v) {
    for (int u = 0; u < n; ++u) {
      const double d = row_median[v] * col_median[u];
      out[static_cast<size_t>(v) * n + u] = d > 0 ? power[static_cast<size_t>(v) * n + u] * overall / d : 0.0;
    }
  }
  return out;
}

std::vector<double> azimuthal_average(const std::vector<double>& power, int n, int bins) {
  std::vector<double> sum(bins, 0.0);
  std::vector<int> count(bins, 0);
  const auto& bin_of = radial_bins(n, bins);
  for (size_t i = 0; i < bin_of.size(); ++i) {
    const int b = bin_of[i];
    if (b < 0) continue;
    sum[b] += power[i];  // in the same order as before the table: the sums are bit for bit the same
    ++count[b];
  }
  for (int b = 0; b < bins; ++b) sum[b] = count[b] > 0 ? sum[b] / count[b] : 0.0;
  return sum;
}

}  // namespace residue
