// Residual kernels, co-occurrences, SPAM, Immerkaer and moments against their published
// definitions, hand-worked examples and scipy.
#include <doctest/doctest.h>

#include <cmath>
#include <random>
#include <sstream>

#include "residue/features/filters.hpp"
#include "support.hpp"

using namespace residue;

namespace {

const Kernel& kernel(std::string_view name) {
  for (const auto& k : rich_model_kernels()) {
    if (k.name == name) return k;
  }
  throw std::runtime_error("no kernel");
}

std::vector<float> polynomial_image(int n, double cx, double cy, double cxx, double cyy, double cxy) {
  std::vector<float> v(static_cast<size_t>(n) * n);
  for (int y = 0; y < n; ++y) {
    for (int x = 0; x < n; ++x) {
      v[static_cast<size_t>(y) * n + x] =
          static_cast<float>(7 + cx * x + cy * y + cxx * x * x + cyy * y * y + cxy * x * y);
    }
  }
  return v;
}

double max_abs(const Plane& p) {
  double m = 0;
  for (float v : p.values) m = std::max(m, static_cast<double>(std::fabs(v)));
  return m;
}

}  // namespace

TEST_CASE("round_half_away equals C's lround (ISO C 7.12.9.7: halves away from zero)") {
  for (float v : {0.0F, 0.5F, -0.5F, 1.5F, -1.5F, 2.5F, 254.5F, 255.49998F, 0.49999997F, -0.49999997F,
                  std::nextafter(0.5F, 0.0F), std::nextafter(0.5F, 1.0F), 8388607.5F, -8388607.5F,
                  16777216.0F, 1e9F, -1e9F}) {
    CAPTURE(v);
    CHECK(round_half_away(v) == std::lround(v));
  }
  std::mt19937 rng(5);
  std::uniform_real_distribution<float> any(-300.0F, 300.0F);
  for (int i = 0; i < 100000; ++i) {
    const float v = any(rng);
    REQUIRE(round_half_away(v) == std::lround(v));
  }
}

TEST_CASE("rich-model kernels have the published coefficients") {
  // Fridrich & Kodovsky (2012), "Rich models for steganalysis of digital images", Fig. 2:
  // 1st order [-1 1], 2nd [1 -2 1], 3rd [1 -3 3 -1], SQUARE 3x3 and SQUARE 5x5 ("KV"), with
  // quantisation steps q = c (1, 2, 3, 4, 12). Coefficients written here from memory of the paper.
  CHECK(kernel("o1").taps == std::vector<double>{-1, 1});
  CHECK(kernel("o2").taps == std::vector<double>{1, -2, 1});
  CHECK(kernel("o3").taps == std::vector<double>{1, -3, 3, -1});
  CHECK(kernel("kv3").taps == std::vector<double>{-1, 2, -1, 2, -4, 2, -1, 2, -1});
  CHECK(kernel("kv5").taps == std::vector<double>{-1, 2,  -2, 2,  -1, 2,  -6, 8,  -6, 2,  -2, 8, -12,
                                                  8,  -2, 2,  -6, 8,  -6, 2,  -1, 2,  -2, 2,  -1});
  CHECK(kernel("kv3").step == 4.0);
  CHECK(kernel("kv5").step == 12.0);
}

TEST_CASE("an order-k residual annihilates polynomials of degree below k (the SRM design rule)") {
  constexpr int n = 16;
  const auto constant = polynomial_image(n, 0, 0, 0, 0, 0);
  const auto linear = polynomial_image(n, 3, -2, 0, 0, 0);
  const auto quadratic = polynomial_image(n, 3, -2, 0.5, 0.25, 0);
  CHECK(max_abs(correlate_valid(constant.data(), n, n, kernel("o1"))) == 0.0);
  CHECK(max_abs(correlate_valid(linear.data(), n, n, kernel("o1"))) == doctest::Approx(3.0));
  CHECK(max_abs(correlate_valid(linear.data(), n, n, kernel("o2"))) < 1e-3);
  CHECK(max_abs(correlate_valid(quadratic.data(), n, n, kernel("o3"))) < 1e-3);
  CHECK(max_abs(correlate_valid(linear.data(), n, n, kernel("kv3"))) < 1e-3);
  CHECK(max_abs(correlate_valid(quadratic.data(), n, n, kernel("kv5"))) < 1e-3);
  // the vertical form of a directional kernel works on columns
  CHECK(max_abs(correlate_valid(linear.data(), n, n, kernel("o1").transposed())) == doctest::Approx(2.0));
}

TEST_CASE("pair classes under sign and order symmetry: 9 for T = 2 (Burnside's lemma)") {
  // Orbits of {identity, negate, swap, negate-swap} on [-2,2]^2: (25 + 1 + 5 + 5) / 4 = 9.
  CHECK(folded_pair_classes(2) == 9);
  // T = 1: (9 + 1 + 3 + 3) / 4 = 4.
  CHECK(folded_pair_classes(1) == 4);
}

TEST_CASE("folded co-occurrence counts equal a hand-worked example") {
  // Residuals [0, 1, -1], step 1, T = 2, pairs along the row: (0, 1) and (1, -1).
  // Classes in lexicographic order of their smallest member: (-2,-2) (-2,-1) (-2,0) (-2,1)
  // (-2,2) (-1,-1) (-1,0) (-1,1) (0,0). (0,1) ~ (-1,0) is class 6; (1,-1) ~ (-1,1) is class 7.
  const Plane r{3, 1, {0.2F, 0.9F, -1.4F}};  // rounds to 0, 1, -1
  std::vector<double> h(9, 0.0);
  CHECK(add_folded_pairs(r, 1.0, 2, true, h) == 2);
  CHECK(h == std::vector<double>{0, 0, 0, 0, 0, 0, 1, 1, 0});
  // With step 2 the values quantise to 0, 0, -1: pairs (0,0) -> 8 and (0,-1) ~ (-1,0) -> 6.
  std::vector<double> h2(9, 0.0);
  add_folded_pairs(r, 2.0, 2, true, h2);
  CHECK(h2 == std::vector<double>{0, 0, 0, 0, 0, 0, 1, 0, 1});
}

TEST_CASE("SPAM transition probabilities equal a hand-worked example") {
  // Pevny, Bas & Fridrich (2010), first-order SPAM, T = 2. Image: three equal rows
  // [10 11 13 13 12]. Rightward differences I(x) - I(x+1): -1 -2 0 1, transitions (v -> u):
  // -1->-2, -2->0, 0->1. Leftward I(x) - I(x-1) from the right end: -1 0 2 1: -1->0, 0->2, 2->1.
  // Up and down: all differences 0, so M(0|0) = 1. Straight average = (M> + M< + Mv + M^) / 4.
  // Diagonals repeat the row differences: down-right and up-right as rightward, the other two as
  // leftward, so the diagonal average is (M> + M<) / 2.
  const std::vector<float> img = {10, 11, 13, 13, 12, 10, 11, 13, 13, 12, 10, 11, 13, 13, 12};
  const auto f = spam_first_order(img.data(), 5, 3, 2);
  REQUIRE(f.size() == 50);
  auto at = [&](int group, int u, int v) { return f[group * 25 + (u + 2) * 5 + (v + 2)]; };
  CHECK(at(0, 0, 0) == doctest::Approx(0.5));
  CHECK(at(0, -2, -1) == doctest::Approx(0.25));
  CHECK(at(0, 0, -1) == doctest::Approx(0.25));
  CHECK(at(0, 0, -2) == doctest::Approx(0.25));
  CHECK(at(0, 1, 0) == doctest::Approx(0.25));
  CHECK(at(0, 2, 0) == doctest::Approx(0.25));
  CHECK(at(0, 1, 2) == doctest::Approx(0.25));
  CHECK(at(1, -2, -1) == doctest::Approx(0.5));
  CHECK(at(1, 0, -1) == doctest::Approx(0.5));
  CHECK(at(1, 0, 0) == doctest::Approx(0.0));
  CHECK(at(1, 1, 0) == doctest::Approx(0.5));
  CHECK(at(1, 0, -2) == doctest::Approx(0.5));
  CHECK(at(1, 2, 0) == doctest::Approx(0.5));
  CHECK(at(1, 1, 2) == doctest::Approx(0.5));
  // Each direction's rows sum to 1 per observed v: straight (3 + 3 + 1 + 1) / 4 = 2,
  // diagonal (3 + 3 + 3 + 3) / 4 = 3.
  double total = 0;
  for (double v : f) total += v;
  CHECK(total == doctest::Approx(5.0));
}

TEST_CASE("Immerkaer's estimate is within 10 % of sigma for Gaussian noise on a smooth image") {
  // Immerkaer (1996), "Fast noise variance estimation", CVIU 64(2): the estimator is unbiased
  // for additive white Gaussian noise on locally linear images.
  constexpr int n = 256;
  std::vector<float> smooth(static_cast<size_t>(n) * n);
  for (int y = 0; y < n; ++y) {
    for (int x = 0; x < n; ++x) {
      smooth[static_cast<size_t>(y) * n + x] =
          static_cast<float>(128 + 40 * std::sin(x / 40.0) * std::cos(y / 55.0) + 0.1 * x);
    }
  }
  for (double sigma : {2.0, 5.0, 10.0}) {
    CAPTURE(sigma);
    std::mt19937 rng(11);
    std::normal_distribution<double> noise(0.0, sigma);
    auto noisy = smooth;
    for (auto& v : noisy) v += static_cast<float>(noise(rng));
    const double estimate = immerkaer_sigma(noisy.data(), n, n);
    CHECK(estimate >= 0.9 * sigma);
    CHECK(estimate <= 1.1 * sigma);
  }
}

TEST_CASE("moments equal numpy.var and scipy.stats.kurtosis") {
  std::mt19937 rng(5);
  std::student_t_distribution<double> heavy(5.0);
  std::vector<float> values(5000);
  for (auto& v : values) v = static_cast<float>(3.0 * heavy(rng));
  const auto path = test::scratch() / "moments.f32";
  test::write_floats(path, values);
  std::istringstream ref(test::python("moments.py", {path.string()}));
  double variance = 0;
  double kurt = 0;
  ref >> variance >> kurt;
  const Moments m = moments(values);
  CHECK(m.variance == doctest::Approx(variance).epsilon(1e-9));
  CHECK(m.excess_kurtosis == doctest::Approx(kurt).epsilon(1e-9));
}
