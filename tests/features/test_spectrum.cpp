// Power spectrum and azimuthal average against numpy.fft / scipy.signal (Debian python3-numpy,
// python3-scipy), on a crop of scikit-image's "camera" photograph.
#include <doctest/doctest.h>

#include <cmath>
#include <nlohmann/json.hpp>
#include <thread>
#include <vector>

#include "residue/features/spectrum.hpp"
#include "support.hpp"

using namespace residue;

TEST_CASE("hann_power_spectrum and azimuthal_average equal numpy.fft within 1e-9 relative") {
  constexpr int n = 64;
  constexpr int bins = 16;
  const Image camera = test::load(test::sample("camera.png"));
  const Image window = crop(camera, 200, 180, n, n);
  const auto path = test::scratch() / "camera64.f32";
  test::write_floats(path, window.samples);

  const auto reference = nlohmann::json::parse(test::python("spectrum.py", {path.string(), "64", "16"}));
  const auto power = hann_power_spectrum(window.samples.data(), n);
  const auto expected_power = reference["power"].get<std::vector<double>>();
  REQUIRE(power.size() == expected_power.size());
  double peak = 0.0;
  for (double p : expected_power) peak = std::max(peak, p);
  for (size_t i = 0; i < power.size(); ++i) {
    // Two-sided: relative to each value, with a floor of 1e-12 of the peak for near-zero bins.
    CHECK(std::fabs(power[i] - expected_power[i]) <= 1e-9 * std::fabs(expected_power[i]) + 1e-12 * peak);
  }
  const auto rings = azimuthal_average(power, n, bins);
  const auto expected_rings = reference["rings"].get<std::vector<double>>();
  REQUIRE(rings.size() == expected_rings.size());
  for (int b = 0; b < bins; ++b) CHECK(rings[b] == doctest::Approx(expected_rings[b]).epsilon(1e-9));
}

TEST_CASE("a pure sinusoid at an exact bin puts all its power within one bin of that bin") {
  // The periodic Hann window's DFT is non-zero only at offsets 0 and +-1 (Harris 1978); the
  // constant column direction is windowed too, so v = 0 and +-1 share the power.
  constexpr int n = 64;
  std::vector<float> image(n * n);
  for (int y = 0; y < n; ++y) {
    for (int x = 0; x < n; ++x) image[y * n + x] = static_cast<float>(std::cos(2 * M_PI * 8 * x / n));
  }
  const auto power = hann_power_spectrum(image.data(), n);
  double total = 0.0;
  for (double p : power) total += p;
  double main = 0.0;
  for (int v : {0, 1, n - 1}) {
    for (int u : {7, 8, 9, n - 9, n - 8, n - 7}) main += power[v * n + u];
  }
  CHECK(main / total == doctest::Approx(1.0).epsilon(1e-9));
  CHECK(dft_frequency(8, n) == doctest::Approx(0.125));
  CHECK(dft_frequency(n - 8, n) == doctest::Approx(-0.125));
}

TEST_CASE("the FFTW plan cache under concurrent first use: every thread gets the one-thread spectrum") {
  // FFTW's planner is not thread-safe (FFTW manual, 5.4 "Thread safety"); plans are made under a
  // lock, once per size, and executed on each thread's own arrays. Sizes no other test uses, so
  // that the threads race to create them.
  const Image camera = test::load(test::sample("camera.png"));
  for (const int n : {40, 72, 88, 104, 120}) {
    const Image window = crop(camera, 100, 100, n, n);
    std::vector<std::vector<double>> got(8);
    std::vector<std::thread> threads;
    threads.reserve(got.size());
    for (size_t t = 0; t < got.size(); ++t)
      threads.emplace_back([&, t] { got[t] = hann_power_spectrum(window.samples.data(), n); });
    for (auto& t : threads) t.join();
    const auto alone = hann_power_spectrum(window.samples.data(), n);
    for (const auto& g : got) CHECK(g == alone);
  }
}
