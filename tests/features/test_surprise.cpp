// The coding-surprise family (surprise.hpp) against the JPEG-LS standard's thresholds, scipy's
// entropy, an independent numpy implementation of the classes, and images drawn from the camera
// model's own distributions.
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <fstream>
#include <random>

#include "residue/features/extract.hpp"
#include "residue/features/families.hpp"
#include "residue/features/surprise.hpp"
#include "support.hpp"

using namespace residue;

namespace {

// The default thresholds of ISO/IEC 14495-1 (ITU-T T.87), C.2.4.1.1, for MAXVAL and NEAR, from the
// standard's formulas as we remember them: FACTOR = floor((min(MAXVAL, 4095) + 128) / 256), and
// T1 = CLAMP(FACTOR (BASIC_T1 - 2) + 2 + 3 NEAR), T2 = CLAMP(FACTOR (BASIC_T2 - 3) + 3 + 5 NEAR),
// T3 = CLAMP(FACTOR (BASIC_T3 - 4) + 4 + 7 NEAR) with BASIC_T1..3 = 3, 7, 21.
std::array<int, 3> standard_thresholds(int maxval, int near) {
  const int factor = (std::min(maxval, 4095) + 128) / 256;
  auto clamp = [&](int v, int lo) { return v > maxval || v < lo ? lo : v; };
  const int t1 = clamp(factor * (3 - 2) + 2 + 3 * near, near + 1);
  const int t2 = clamp(factor * (7 - 3) + 3 + 5 * near, t1);
  const int t3 = clamp(factor * (21 - 4) + 4 + 7 * near, t2);
  return {t1, t2, t3};
}

// An n x n image drawn pixel by pixel from a camera pixel model: each pixel is its MED prediction
// plus a residual from the two-sided geometric distribution of its class (the difference of two
// independent geometric variables with success probability 1 - t has exactly that law), reduced
// modulo 256 as JPEG-LS does. Borders (first row and column, last column) are uniform noise.
std::vector<int> draw_image(const CameraPixelModel& model, int n, std::mt19937& rng, double scale = 1.0) {
  std::vector<int> x(static_cast<size_t>(n) * n);
  std::uniform_int_distribution<int> border(0, 255);
  for (auto& v : x) v = border(rng);
  for (int y = 1; y < n; ++y) {
    for (int i = 1; i + 1 < n; ++i) {
      const size_t k = static_cast<size_t>(y) * n + i;
      const int a = x[k - 1], b = x[k - n], c = x[k - n - 1], d = x[k - n + 1];
      const auto cls = static_cast<size_t>(surprise_class(a, b, c, d));
      // `scale` draws from another law: the class's mean |r| times scale.
      const double t = tsgd_theta(tsgd_mean_abs(model.theta[0][cls]) * scale);
      std::geometric_distribution<int> g(1.0 - t);
      const int r = g(rng) - g(rng);
      x[k] = (med_predict(a, b, c) + r) & 255;
    }
  }
  return x;
}

// The surprise statistics row of a plane at full scale only (the coarser levels left at zero).
std::vector<double> full_scale_stats(const std::vector<int>& plane, int n, ClassSums* sums_out = nullptr) {
  const ClassSums sums = class_sums(plane, n);
  double total = 0.0;
  for (double p : sums.pixels) total += p;
  std::vector<double> row(kSurpriseStats, 0.0);
  for (int c = 0; c < kSurpriseClasses; ++c) {
    row[2 * static_cast<size_t>(c)] = sums.pixels[static_cast<size_t>(c)] / total;
    row[2 * static_cast<size_t>(c) + 1] = sums.abs_sum[static_cast<size_t>(c)] / total;
  }
  if (sums_out != nullptr) *sums_out = sums;
  return row;
}

// The standard error of the full-scale gap D (bits per pixel) of an image drawn from the model:
// D = sum over pixels of b_c (|r| - E_c) / N, independent terms with Var|r| = E r^2 - (E|r|)^2,
// E r^2 = 2t / (1 - t)^2 for the two-sided geometric law.
// E r^2 of the two-sided geometric law, derived from its definition (checked against a direct sum
// with numpy in the entropy test below).
double tsgd_second_moment(double t) { return 2.0 * t / ((1.0 - t) * (1.0 - t)); }

double gap_standard_error(const CameraPixelModel& model, const ClassSums& sums) {
  double var = 0.0;
  double total = 0.0;
  for (size_t c = 0; c < kSurpriseClasses; ++c) {
    const double t = model.theta[0][c];
    const double mean = tsgd_mean_abs(t);
    const double second = tsgd_second_moment(t);
    var += sums.pixels[c] * (second - mean * mean) * std::log2(t) * std::log2(t);
    total += sums.pixels[c];
  }
  return std::sqrt(var) / total;
}

constexpr size_t kGapFull =
    2 * static_cast<size_t>(kSurpriseLevels);  // surprise.gap.full among the derived values

CameraPixelModel example_model() {
  // Mean |r| per class rising with activity, as camera photos show (values of our choosing).
  const double m[kSurpriseClasses] = {0.6, 1.0, 1.5, 2.2, 3.0, 4.0, 5.5, 7.0, 12.0};
  CameraPixelModel model;
  for (size_t l = 0; l < kSurpriseLevels; ++l) {
    for (size_t c = 0; c < kSurpriseClasses; ++c) {
      model.mean_abs[l][c] = m[c];
      model.theta[l][c] = tsgd_theta(m[c]);
    }
  }
  return model;
}

}  // namespace

TEST_CASE("surprise: the context quantiser uses the JPEG-LS default thresholds for 8-bit samples") {
  // ITU-T T.87 / ISO/IEC 14495-1 C.2.4.1.1: for 8 bits (MAXVAL 255), NEAR 0: T1 = 3, T2 = 7, T3 = 21.
  const auto t = standard_thresholds(255, 0);
  CHECK(t[0] == 3);
  CHECK(t[1] == 7);
  CHECK(t[2] == 21);
  // The region boundaries sit exactly at those thresholds (A.3.3): the class of a context whose three
  // gradients are all just below or at each threshold.
  for (int k = 0; k < 3; ++k) {
    CAPTURE(k);
    CHECK(std::abs(jpegls_gradient_region(t[static_cast<size_t>(k)] - 1)) == k + 1);
    CHECK(std::abs(jpegls_gradient_region(t[static_cast<size_t>(k)])) == k + 2);
    CHECK(std::abs(jpegls_gradient_region(-t[static_cast<size_t>(k)])) == k + 2);
  }
  // Activity classes: a flat neighbourhood is class 0; d - b = 3, b - c = 7, c - a = 21 gives regions
  // 2 + 3 + 4 = 9, capped at 8; d - b = 1 alone gives 1.
  CHECK(surprise_class(100, 100, 100, 100) == 0);
  CHECK(surprise_class(72, 100, 93, 103) == 8);  // a = 72, b = 100, c = 93, d = 103
  CHECK(surprise_class(100, 100, 100, 101) == 1);
  CHECK(surprise_class(100, 100, 100, 106) == 2);
  // Reduction modulo 256 to [-128, 127].
  CHECK(reduced_residual(250, 2) == -8);
  CHECK(reduced_residual(2, 250) == 8);
  CHECK(reduced_residual(128, 0) == -128);
  CHECK(reduced_residual(127, 0) == 127);
}

TEST_CASE("surprise: class counts and residual sums equal an independent numpy implementation") {
  std::mt19937 rng(5);
  const int n = 48;
  std::vector<int> x(static_cast<size_t>(n) * n);
  // Smooth ramps with noise of several strengths, and a few hard edges, so every class is used.
  std::normal_distribution<double> noise(0.0, 1.0);
  for (int y = 0; y < n; ++y) {
    for (int i = 0; i < n; ++i) {
      const double sigma = 0.3 + 12.0 * (i / static_cast<double>(n));
      const double edge = (y / 12) % 2 == 0 ? 0.0 : 90.0;
      x[static_cast<size_t>(y) * n + i] =
          static_cast<int>(std::clamp(std::lround(60 + 2 * y + edge + sigma * noise(rng)), 0L, 255L));
    }
  }
  const auto csv = test::scratch() / "surprise_classes.csv";
  {
    std::ofstream out(csv);
    for (int y = 0; y < n; ++y) {
      for (int i = 0; i < n; ++i) out << x[static_cast<size_t>(y) * n + i] << (i + 1 < n ? "," : "\n");
    }
  }
  const auto expected = test::numbers(test::python("surprise_reference.py", {"classes", csv.string()}));
  REQUIRE(expected.size() == 2 * kSurpriseClasses);
  const ClassSums sums = class_sums(x, n);
  // Extraction takes them from the coding family's pass (one pass per scale for both families).
  ClassSums shared;
  (void)coding_cost_bits(x, n, &shared);
  double used = 0;
  for (size_t c = 0; c < kSurpriseClasses; ++c) {
    CAPTURE(c);
    CHECK(sums.pixels[c] == expected[2 * c]);
    CHECK(sums.abs_sum[c] == expected[2 * c + 1]);
    CHECK(shared.pixels[c] == expected[2 * c]);
    CHECK(shared.abs_sum[c] == expected[2 * c + 1]);
    used += sums.pixels[c] > 0;
  }
  CHECK(used >= 7);  // the image exercises the classes
}

TEST_CASE("surprise: entropy and mean of the two-sided geometric law against scipy and a direct sum") {
  for (const double t : {0.05, 0.3, 0.62, 0.9}) {
    CAPTURE(t);
    const auto ref = test::numbers(test::python("surprise_reference.py", {"entropy", std::to_string(t)}));
    REQUIRE(ref.size() == 3);
    CHECK(tsgd_entropy_bits(t) == doctest::Approx(ref[0]).epsilon(1e-9));
    CHECK(tsgd_mean_abs(t) == doctest::Approx(ref[1]).epsilon(1e-9));
    CHECK(tsgd_second_moment(t) == doctest::Approx(ref[2]).epsilon(1e-9));  // behind the gap's standard error
    // The maximum-likelihood t from that mean is t again.
    CHECK(tsgd_theta(tsgd_mean_abs(t)) == doctest::Approx(t).epsilon(1e-12));
    // NLL of a known sample by a direct sum of -log2 P(r): the counts of r = -2..2 below.
    const int counts[] = {3, 10, 40, 12, 2};
    double direct = 0.0, pixels = 0.0, abs_sum = 0.0;
    for (int r = -2; r <= 2; ++r) {
      const double p = (1 - t) / (1 + t) * std::pow(t, std::abs(r));
      direct += counts[r + 2] * -std::log2(p);
      pixels += counts[r + 2];
      abs_sum += counts[r + 2] * std::abs(r);
    }
    double cost = 0.0;
    for (int r = -2; r <= 2; ++r) cost += counts[r + 2] * tsgd_cost_bits(t, r);
    CHECK(cost == doctest::Approx(direct).epsilon(1e-12));
    // The family's NLL from the statistics (all pixels in one class) is the same sum per pixel.
    CameraPixelModel model;
    for (auto& level : model.theta) level.fill(t);
    std::vector<double> row(kSurpriseStats, 0.0);
    row[0] = 1.0;
    row[1] = abs_sum / pixels;
    const auto v = surprise_values(model, row.data());
    CHECK(v[0] == doctest::Approx(direct / pixels).epsilon(1e-12));
    CHECK(v[kSurpriseLevels] == doctest::Approx(tsgd_entropy_bits(t)).epsilon(1e-12));
  }
}

TEST_CASE(
    "surprise: an image drawn from the camera model has a gap of zero within its standard error; "
    "another law does not") {
  const CameraPixelModel model = example_model();
  std::mt19937 rng(11);
  const int n = 256;
  int within = 0;
  for (int trial = 0; trial < 6; ++trial) {
    ClassSums sums;
    const auto row = full_scale_stats(draw_image(model, n, rng), n, &sums);
    const double gap = surprise_values(model, row.data())[kGapFull];
    const double se = gap_standard_error(model, sums);
    CAPTURE(gap);
    CAPTURE(se);
    CHECK(std::fabs(gap) < 4.0 * se);
    within += std::fabs(gap) < 2.0 * se;
  }
  CHECK(within >= 4);  // about 95 % of draws fall within two standard errors
  // Residuals 40 % larger, or 40 % smaller, than the model's in every class: far outside.
  for (const double scale : {1.4, 0.6}) {
    ClassSums sums;
    const auto row = full_scale_stats(draw_image(model, n, rng, scale), n, &sums);
    const double gap = surprise_values(model, row.data())[kGapFull];
    const double se = gap_standard_error(model, sums);
    CAPTURE(scale);
    CAPTURE(gap);
    CHECK(std::fabs(gap) > 10.0 * se);
    CHECK((gap > 0) == (scale > 1));  // larger residuals cost more than expected
  }
}

TEST_CASE("surprise: fitting on drawn images recovers the model, and derived values are linear") {
  const CameraPixelModel model = example_model();
  std::mt19937 rng(3);
  std::vector<std::vector<double>> rows(4);
  for (auto& r : rows) r = full_scale_stats(draw_image(model, 128, rng), 128);
  std::vector<const double*> pointers(rows.size());
  for (size_t i = 0; i < rows.size(); ++i) pointers[i] = rows[i].data();
  const CameraPixelModel fitted = fit_camera_pixels(pointers);
  CHECK(fitted.images == 4);
  // Classes with a few thousand pixels recover their mean |r| within 5 %; a drawn image leaves the
  // flattest classes nearly empty (its residuals make neighbours differ), so they are not checked.
  int checked = 0;
  for (size_t c = 0; c < kSurpriseClasses; ++c) {
    double pixels = 0.0;
    for (const auto& r : rows) pixels += r[2 * c] * 126.0 * 127.0;
    if (pixels < 3000) continue;
    CAPTURE(c);
    CHECK(fitted.mean_abs[0][c] == doctest::Approx(model.mean_abs[0][c]).epsilon(0.05));
    ++checked;
  }
  CHECK(checked >= 3);
  // The derived values of the mean of two rows are the mean of their derived values (what pooling
  // windows by the mean relies on).
  std::vector<double> mean(kSurpriseStats);
  for (size_t k = 0; k < mean.size(); ++k) mean[k] = (rows[0][k] + rows[1][k]) / 2;
  const auto a = surprise_values(model, rows[0].data());
  const auto b = surprise_values(model, rows[1].data());
  const auto m = surprise_values(model, mean.data());
  for (size_t k = 0; k < m.size(); ++k) CHECK(m[k] == doctest::Approx((a[k] + b[k]) / 2).epsilon(1e-12));
}

TEST_CASE("surprise: the family in the vector: statistics from extraction, model values left at zero") {
  const auto& names = feature_names();
  const auto first = std::find(names.begin(), names.end(), "surprise.stats.full.c0.share");
  REQUIRE(first != names.end());
  const auto at = static_cast<size_t>(first - names.begin());
  CHECK(names.size() == at + kSurpriseStats + kSurpriseDerived);
  CHECK(is_model_value("surprise.gap.full"));
  CHECK_FALSE(is_model_value("surprise.stats.half.c3.abs"));
  const Image image = test::load(test::sample("camera.png"));
  const auto extraction = extract_image(image);
  REQUIRE(extraction);
  const auto& v = extraction->features.values;
  for (int level = 0; level < kSurpriseLevels; ++level) {
    double share = 0.0;
    for (int c = 0; c < kSurpriseClasses; ++c)
      share += v[at + 2 * static_cast<size_t>(level * kSurpriseClasses + c)];
    CHECK(share == doctest::Approx(1.0).epsilon(1e-12));  // every pixel falls in one class
  }
  for (size_t k = at + kSurpriseStats; k < names.size(); ++k) CHECK(v[k] == 0.0);
}
