// The camera-side trace families and the richer co-occurrences: noise level function, texture
// contrast, predictive coding cost, higher-order and cross-colour co-occurrences, chroma planes.
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <random>

#include "residue/features/extract.hpp"
#include "residue/features/families.hpp"
#include "residue/features/filters.hpp"
#include "support.hpp"

using namespace residue;

namespace {

Tile grey_tile(int n, const std::vector<float>& plane) { return Tile{0, 0, n, 1, plane}; }

size_t index_of(const std::vector<std::string>& names, const std::string& name) {
  const auto it = std::find(names.begin(), names.end(), name);
  REQUIRE(it != names.end());
  return static_cast<size_t>(it - names.begin());
}

// A horizontal ramp 20..235 with Poisson-Gaussian noise y = a P(mu / a) + N(0, b) (Foi et al.
// 2008, eq. 2-3): variance a mu + b. Simulated by this test.
std::vector<float> poisson_gaussian_ramp(int n, double a, double b, unsigned seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> gauss(0.0, std::sqrt(b));
  std::vector<float> plane(static_cast<size_t>(n) * n);
  for (int y = 0; y < n; ++y) {
    for (int x = 0; x < n; ++x) {
      const double mu = 20.0 + 215.0 * x / (n - 1);
      double v = mu;
      if (a > 0) v = a * static_cast<double>(std::poisson_distribution<int>(mu / a)(rng));
      plane[static_cast<size_t>(y) * n + x] = static_cast<float>(v + gauss(rng));
    }
  }
  return plane;
}

}  // namespace

TEST_CASE("noise level function: Poisson-Gaussian noise of known a, b is recovered (Foi et al. 2008)") {
  // Our tolerance: 10 % on a and 2 (grey levels squared) on b (one 256 px window, ~70 blocks per
  // intensity bin).
  for (const auto& [a, b] : {std::pair{0.5, 4.0}, std::pair{1.0, 1.0}, std::pair{0.2, 9.0}}) {
    CAPTURE(a);
    CAPTURE(b);
    const auto plane = poisson_gaussian_ramp(256, a, b, 7);
    const NoiseLevelCurve k = noise_level_function(plane.data(), 256);
    CHECK(k.intensity.size() >= 12);
    CHECK(k.slope == doctest::Approx(a).epsilon(0.10));
    CHECK(std::fabs(k.offset - b) <= 2.0);
    CHECK(k.kendall_tau > 0.8);  // variance rises with intensity
  }
  SUBCASE("signal-independent Gaussian noise gives a flat curve") {
    const auto plane = poisson_gaussian_ramp(256, 0.0, 16.0, 8);
    const NoiseLevelCurve k = noise_level_function(plane.data(), 256);
    CHECK(std::fabs(k.slope) < 0.02);
    CHECK(k.offset == doctest::Approx(16.0).epsilon(0.10));
  }
  SUBCASE("a noise-free rendering gives a = b = 0 (the residual is blind to ramps)") {
    const auto plane = poisson_gaussian_ramp(256, 0.0, 0.0, 9);
    const NoiseLevelCurve k = noise_level_function(plane.data(), 256);
    CHECK(std::fabs(k.slope) < 1e-6);
    CHECK(std::fabs(k.offset) < 1e-6);
    const Tile tile = grey_tile(256, plane);
    const auto values = sensor_window({tile, tile.luma()});
    REQUIRE(values.size() == sensor_names().size());
    CHECK(values[index_of(sensor_names(), "sensor.nlf.channel_spread")] == 0.0);  // grey: one curve
  }
}

TEST_CASE("texture diversity: a hand-worked 2 x 2 patch (Zhong et al. 2023, four directions)") {
  // [[0, 1], [3, 7]]: rows |0-1| + |3-7| = 5, columns |0-3| + |1-7| = 9, diagonal |0-7| = 7,
  // anti-diagonal |3-1| = 2: 23.
  const float patch[4] = {0, 1, 3, 7};
  CHECK(texture_diversity(patch, 2, 2) == doctest::Approx(23.0));
  // Ranking: a flat patch comes before a noisy one.
  std::vector<float> plane(64 * 64, 100.0F);
  std::mt19937 rng(1);
  std::uniform_real_distribution<float> u(0.0F, 50.0F);
  for (int y = 0; y < 32; ++y)
    for (int x = 32; x < 64; ++x) plane[static_cast<size_t>(y) * 64 + x] += u(rng);
  const auto order = patches_by_texture(plane.data(), 64, 32);
  CHECK(order.back() == 1);  // the top-right patch is the richest
}

TEST_CASE("texture contrast: moments of the poorest and richest thirds equal numpy/scipy's") {
  const Image astronaut = test::load(test::sample("astronaut.png"));
  const Image part = crop(astronaut, 120, 40, 256, 256);
  Tile tile{0, 0, 256, 3, part.samples};
  const WindowInput input(tile, tile.luma());
  const auto path = test::scratch() / "texture_luma.f32";
  test::write_floats(path, input.luma);
  const auto expected = test::numbers(test::python("traces_reference.py", {"texture", path.string(), "256"}));
  REQUIRE(expected.size() == 4);
  const auto values = texture_window(input);
  const auto& names = texture_names();
  CHECK(values[index_of(names, "texture.poor.log_variance")] == doctest::Approx(expected[0]).epsilon(1e-4));
  CHECK(values[index_of(names, "texture.poor.log_kurtosis")] == doctest::Approx(expected[1]).epsilon(1e-4));
  CHECK(values[index_of(names, "texture.rich.log_variance")] == doctest::Approx(expected[2]).epsilon(1e-4));
  CHECK(values[index_of(names, "texture.rich.log_kurtosis")] == doctest::Approx(expected[3]).epsilon(1e-4));
  CHECK(values[index_of(names, "texture.contrast.log_variance")] ==
        doctest::Approx(expected[2] - expected[0]).epsilon(1e-4));
  CHECK(values[index_of(names, "texture.contrast.log_diversity")] > 0.0);
}

TEST_CASE("JPEG-LS MED predictor and gradient regions follow ISO/IEC 14495-1") {
  // Hand-worked 3 x 3 neighbourhoods (c north-west, b north, a west):
  //   c = 10, b = 20, a = 15: c <= min(a, b) -> max(a, b) = 20 (an edge above)
  //   c = 25, b = 20, a = 15: c >= max(a, b) -> min(a, b) = 15
  //   c = 17, b = 20, a = 15: between -> a + b - c = 18 (planar)
  CHECK(med_predict(15, 20, 10) == 20);
  CHECK(med_predict(15, 20, 25) == 15);
  CHECK(med_predict(15, 20, 17) == 18);
  // Regions with T1 = 3, T2 = 7, T3 = 21 (A.3.3, code segment A.4).
  const int d[] = {-21, -20, -7, -6, -3, -2, -1, 0, 1, 2, 3, 6, 7, 20, 21, 200};
  const int q[] = {-4, -3, -3, -2, -2, -1, -1, 0, 1, 1, 2, 2, 3, 3, 4, 4};
  for (size_t i = 0; i < std::size(d); ++i) {
    CAPTURE(d[i]);
    CHECK(jpegls_gradient_region(d[i]) == q[i]);
  }
}

TEST_CASE("coding cost: closed forms for a constant, a ramp and white noise") {
  const int n = 64;
  std::vector<int> constant(static_cast<size_t>(n) * n, 77);
  CHECK(coding_cost_bits(constant, n) == 0.0);
  // I = x + y: MED predicts I - 1 everywhere (c = I - 2 <= min(a, b) = I - 1), one context, a
  // constant error: 0 bits.
  std::vector<int> ramp(static_cast<size_t>(n) * n);
  for (int y = 0; y < n; ++y)
    for (int x = 0; x < n; ++x) ramp[static_cast<size_t>(y) * n + x] = x + y;
  CHECK(coding_cost_bits(ramp, n) == 0.0);
  // Independent uniform samples on 0..255: the residual modulo 256 is uniform, 8 bits per pixel.
  // Our tolerance 0.03 bits (Miller's correction leaves a second-order bias; 1024^2 samples keep
  // it small).
  const int m = 1024;
  std::vector<int> noise(static_cast<size_t>(m) * m);
  std::mt19937 rng(5);
  std::uniform_int_distribution<int> u(0, 255);
  for (int& v : noise) v = u(rng);
  CHECK(coding_cost_bits(noise, m) == doctest::Approx(8.0).epsilon(0.03 / 8.0));
  // Smooth content costs fewer bits than its noisy version.
  const Tile tile = grey_tile(256, poisson_gaussian_ramp(256, 0.0, 1.0, 3));
  const auto values = coding_window({tile, tile.luma()});
  REQUIRE(values.size() == coding_names().size());
  CHECK(values[0] > 0.5);
  CHECK(values[0] < 4.0);
}

TEST_CASE("higher-order co-occurrences equal a brute-force count (Fridrich & Kodovsky 2012 symmetries)") {
  CHECK(folded_tuple_classes(2, 2, true) == 9);
  CHECK(folded_tuple_classes(2, 3, true) == 39);
  CHECK(folded_tuple_classes(2, 4, true) == 169);
  CHECK(folded_tuple_classes(2, 3, false) == 63);
  const int w = 40, h = 30;
  std::mt19937 rng(11);
  std::uniform_int_distribution<int> u(-3, 3);  // values beyond T are truncated to +-2
  auto random_plane = [&] {
    Plane p{w, h, std::vector<float>(static_cast<size_t>(w) * h)};
    for (float& v : p.values) v = static_cast<float>(u(rng));
    return p;
  };
  auto truncated = [](const Plane& p) {
    std::vector<float> t(p.values);
    for (float& v : t) v = std::clamp(v, -2.0F, 2.0F);
    return t;
  };
  const Plane plane = random_plane();
  const auto path = test::scratch() / "tuples.f32";
  test::write_floats(path, truncated(plane));
  for (int order : {2, 3, 4}) {
    CAPTURE(order);
    const auto expected =
        test::numbers(test::python("traces_reference.py", {"tuples", path.string(), std::to_string(w),
                                                           std::to_string(h), std::to_string(order)}));
    std::vector<double> histogram(static_cast<size_t>(folded_tuple_classes(2, order, true)), 0.0);
    CHECK(add_folded_tuples(quantise(plane, 1.0, 2), order, true, histogram) == h * (w - order + 1));
    REQUIRE(expected.size() == histogram.size());
    for (size_t i = 0; i < histogram.size(); ++i) CHECK(histogram[i] == expected[i]);
  }
  // All orders in one pass (the lower ones as marginals of the highest), along rows and columns.
  for (bool along_rows : {true, false}) {
    CAPTURE(along_rows);
    std::vector<std::vector<double>> histograms;
    for (int order : {2, 3, 4})
      histograms.emplace_back(static_cast<size_t>(folded_tuple_classes(2, order, true)), 0.0);
    const auto counts = add_folded_tuple_orders(quantise(plane, 1.0, 2), along_rows, histograms);
    for (int order : {2, 3, 4}) {
      CAPTURE(order);
      std::vector<std::string> args = {"tuples", path.string(), std::to_string(w), std::to_string(h),
                                       std::to_string(order)};
      if (!along_rows) args.emplace_back("columns");
      const auto expected = test::numbers(test::python("traces_reference.py", args));
      CHECK(counts[order - 2] == (along_rows ? h * (w - order + 1) : w * (h - order + 1)));
      REQUIRE(expected.size() == histograms[order - 2].size());
      for (size_t i = 0; i < expected.size(); ++i) CHECK(histograms[order - 2][i] == expected[i]);
    }
  }
  // A plane shorter than the highest order: the orders that fit, counted on their own.
  const QuantisedPlane narrow = quantise(Plane{3, 2, {1, -1, 2, 0, 0, 1}}, 1.0, 2);
  std::vector<std::vector<double>> short_histograms = {
      std::vector<double>(9, 0.0), std::vector<double>(39, 0.0), std::vector<double>(169, 0.0)};
  CHECK(add_folded_tuple_orders(narrow, true, short_histograms) == std::vector<long>{4, 2, 0});
  CHECK(add_folded_tuple_orders(narrow, false, short_histograms) == std::vector<long>{3, 0, 0});
  const Plane r = random_plane(), g = random_plane(), b = random_plane();
  std::vector<std::string> args = {"cross"};
  for (const auto* p : {&r, &g, &b}) {
    args.push_back((test::scratch() / ("cross" + std::to_string(args.size()) + ".f32")).string());
    test::write_floats(args.back(), truncated(*p));
  }
  const auto expected = test::numbers(test::python("traces_reference.py", args));
  std::vector<double> histogram(63, 0.0);
  CHECK(add_cross_channel_triples(quantise(r, 1.0, 2), quantise(g, 1.0, 2), quantise(b, 1.0, 2), histogram) ==
        w * h);
  REQUIRE(expected.size() == histogram.size());
  for (size_t i = 0; i < histogram.size(); ++i) CHECK(histogram[i] == expected[i]);
}

TEST_CASE("chroma planes equal Pillow's JFIF YCbCr (full-range ITU-R BT.601)") {
  const auto path = test::sample("astronaut.png");
  const Image image = test::load(path);
  const Image corner = crop(image, 0, 0, 4, 4);
  const Tile tile{0, 0, 4, 3, corner.samples};
  const auto planes = chroma_planes(tile);
  const auto expected = test::numbers(test::python("traces_reference.py", {"chroma", path.string()}));
  REQUIRE(expected.size() == 32);
  // Pillow's fixed-point conversion truncates to integers, and its integer coefficients are off by
  // up to ~0.01 level here: ours - Pillow's lies in [-0.02, 1.02) (our tolerance).
  for (size_t i = 0; i < 16; ++i) {
    for (int c = 0; c < 2; ++c) {
      const double d = planes[static_cast<size_t>(c)][i] - expected[16 * static_cast<size_t>(c) + i];
      CHECK(d >= -0.02);
      CHECK(d < 1.02);
    }
  }
}

TEST_CASE("the vector holds every family, and the schema names the extractor version") {
  const auto& families = feature_families();
  for (const char* f : {"spectral", "noise", "resampling", "sensor", "texture", "coding", "surprise"}) {
    CAPTURE(f);
    CHECK(std::count(families.begin(), families.end(), f) > 0);
  }
  CHECK(kExtractorVersion == "3.0.0");
  CHECK(feature_names().size() == families.size());
}
