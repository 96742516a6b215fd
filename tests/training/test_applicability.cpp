// The applicability check and the promised threshold: Clopper-Pearson bounds against
// scipy.stats, the PPCA distance against numpy, the joint limits against their definition, and
// the guards of a model on processing its training data never showed.
#include <doctest/doctest.h>

#include <cmath>
#include <fstream>
#include <random>

#include "residue/training/applicability.hpp"
#include "residue/training/model.hpp"
#include "support.hpp"

using namespace residue;

TEST_CASE("Clopper-Pearson upper bounds equal scipy.stats.binomtest(...).proportion_ci(method='exact')") {
  // scipy.stats.binomtest(k, n, alternative="less").proportion_ci(0.95, "exact").high and
  // scipy.stats.beta.ppf(0.95, k + 1, n - k) (Debian python3-scipy).
  const std::pair<size_t, size_t> cases[] = {{0, 299}, {0, 40}, {3, 412}, {1, 10}, {25, 1000}, {7, 7000}};
  for (const auto& [k, n] : cases) {
    const auto ref = test::numbers(
        test::python("applicability_reference.py", {"cp", std::to_string(k), std::to_string(n), "0.95"}));
    REQUIRE(ref.size() == 2);
    CHECK(clopper_pearson_upper(k, n, 0.95) == doctest::Approx(ref[0]).epsilon(1e-9));
    CHECK(clopper_pearson_upper(k, n, 0.95) == doctest::Approx(ref[1]).epsilon(1e-9));
  }
  // Closed form for k = 0: 1 - (1 - c)^(1/n) ("rule of three" territory: about 3/n).
  CHECK(clopper_pearson_upper(0, 100, 0.95) == doctest::Approx(1 - std::pow(0.05, 0.01)).epsilon(1e-12));
  CHECK(clopper_pearson_upper(5, 5, 0.95) == 1.0);
  CHECK(clopper_pearson_upper(0, 0, 0.95) == 1.0);
  // ceil(ln 0.05 / ln 0.99) = ceil(298.07) = 299 camera groups to promise 1 % with none flagged.
  CHECK(trials_needed(0.01, 0.95) == 299);
  CHECK(clopper_pearson_upper(0, 299, 0.95) <= 0.01);
  CHECK(clopper_pearson_upper(0, 298, 0.95) > 0.01);
}

namespace {

// `n` draws of a correlated 5-D Gaussian (the tests' own) in columns 1..5, after a constant
// column 0 that stands for another family.
Matrix correlated_rows(size_t n, unsigned seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> g(0.0, 1.0);
  Matrix z{n, 6, std::vector<double>(n * 6)};
  for (size_t i = 0; i < z.rows; ++i) {
    const double a = g(rng), b = g(rng);
    double* r = z.row(i);
    r[0] = 9.0;  // a column of another family, ignored
    r[1] = 2 * a + 0.1 * g(rng);
    r[2] = a - b + 0.1 * g(rng);
    r[3] = 0.5 * b + 0.3 * g(rng);
    r[4] = g(rng);
    r[5] = a + b + 0.2 * g(rng);
  }
  return z;
}

}  // namespace

TEST_CASE("the PPCA distance equals numpy's on a worked example") {
  // Training rows: 60 correlated draws, test rows: 4 points.
  const Matrix z = correlated_rows(60, 7);
  const std::vector<size_t> columns = {1, 2, 3, 4, 5};
  const FamilyReference ref = fit_family_reference("noise", columns, z, 0.95);
  const std::vector<std::vector<double>> points = {
      {0, 0.1, -0.2, 0.3, 0.0, 0.1}, {0, 2, 1, 0.5, -1, 1.5}, {0, -4, 3, 2, 2, -1}, {0, 0, 0, 0, 6, 0}};
  const auto train_csv = test::scratch() / "ppca_train.csv";
  const auto test_csv = test::scratch() / "ppca_test.csv";
  {
    std::ofstream t(train_csv), u(test_csv);
    t.precision(17);
    u.precision(17);
    for (size_t i = 0; i < z.rows; ++i) {
      for (size_t c = 0; c < columns.size(); ++c) t << (c ? "," : "") << z.row(i)[columns[c]];
      t << "\n";
    }
    for (const auto& p : points) {
      for (size_t c = 0; c < columns.size(); ++c) u << (c ? "," : "") << p[columns[c]];
      u << "\n";
    }
  }
  const auto expected = test::numbers(
      test::python("applicability_reference.py", {"ppca", train_csv.string(), test_csv.string(), "0.95"}));
  REQUIRE(expected.size() == points.size());
  for (size_t i = 0; i < points.size(); ++i)
    CHECK(ref.distance(points[i].data()) == doctest::Approx(expected[i]).epsilon(1e-8));
  // A point far off the training plane is far; the mean itself is near 0.
  CHECK(ref.distance(points[3].data()) > 2.0);
}

TEST_CASE("family moments of two halves combine to those of the whole (Chan, Golub & LeVeque 1979)") {
  // Columns with offsets far from zero, where a naive sum of squares would lose digits.
  std::mt19937 rng(8);
  std::normal_distribution<double> g(0.0, 1.0);
  Matrix z{101, 4, std::vector<double>(size_t{101} * 4)};
  for (size_t i = 0; i < z.rows; ++i) {
    const double a = g(rng);
    z.row(i)[0] = 1e6 + a;
    z.row(i)[1] = 3.0 * a + g(rng);
    z.row(i)[2] = -50.0 + 0.1 * g(rng);
    z.row(i)[3] = g(rng);
  }
  const std::vector<size_t> columns = {0, 1, 2, 3};
  std::vector<size_t> all(z.rows), first, second;
  for (size_t i = 0; i < z.rows; ++i) {
    all[i] = i;
    (i % 3 == 0 ? first : second).push_back(i);
  }
  FamilyMoments combined = FamilyMoments::of(z, columns, first);
  combined += FamilyMoments::of(z, columns, second);
  const FamilyMoments whole = FamilyMoments::of(z, columns, all);
  CHECK(combined.count == whole.count);
  for (size_t j = 0; j < columns.size(); ++j)
    CHECK(combined.mean[j] == doctest::Approx(whole.mean[j]).epsilon(1e-12));
  for (size_t j = 0; j < whole.scatter.size(); ++j)
    CHECK(combined.scatter[j] == doctest::Approx(whole.scatter[j]).epsilon(1e-9).scale(1.0));
  // The scatter is n - 1 times numpy's covariance: check one diagonal entry by its definition.
  double mean3 = 0.0, m33 = 0.0;
  for (size_t i = 0; i < z.rows; ++i) mean3 += z.row(i)[3] / static_cast<double>(z.rows);
  for (size_t i = 0; i < z.rows; ++i) m33 += (z.row(i)[3] - mean3) * (z.row(i)[3] - mean3);
  CHECK(whole.scatter[3 * 4 + 3] == doctest::Approx(m33).epsilon(1e-12));
  // Adding nothing changes nothing; adding to nothing copies.
  FamilyMoments empty;
  FamilyMoments copy = whole;
  copy += empty;
  CHECK(copy.scatter == whole.scatter);
  empty += whole;
  CHECK(empty.mean == whole.mean);
}

TEST_CASE("batched PPCA distances equal the distance of each row") {
  // distance() is held to numpy above; the batched form (one matrix product, used for the
  // out-of-fold limits) must give the same per row. At 90 % explained, fewer components than
  // values are kept, so the residual term counts too.
  const Matrix z = correlated_rows(200, 9);
  const std::vector<size_t> columns = {1, 2, 3, 4, 5};
  std::vector<size_t> rows;
  for (size_t i = 0; i < z.rows; i += 3) rows.push_back(i);
  const FamilyReference ref = fit_family_reference("noise", columns, z, 0.9);
  const auto batched = ref.distances(z, rows);
  REQUIRE(batched.size() == rows.size());
  for (size_t r = 0; r < rows.size(); ++r)
    CHECK(batched[r] == doctest::Approx(ref.distance(z.row(rows[r]))).epsilon(1e-12));
}

TEST_CASE("joint limits let the requested share of images pass every family, and no more than needed") {
  std::mt19937 rng(3);
  std::exponential_distribution<double> e(1.0);
  std::vector<std::vector<double>> d(3, std::vector<double>(500));
  for (auto& family : d) {
    for (double& v : family) v = e(rng);
  }
  const auto limits = joint_limits(d, 0.99);
  REQUIRE(limits.size() == 3);
  auto passing = [&](const std::vector<double>& t) {
    size_t pass = 0;
    for (size_t i = 0; i < 500; ++i) pass += (d[0][i] <= t[0] && d[1][i] <= t[1] && d[2][i] <= t[2]) ? 1 : 0;
    return pass;
  };
  CHECK(passing(limits) >= 495);  // 99 % of 500
  CHECK(passing(limits) <= 497);  // and not far beyond: the limits are not simply the maxima
  // One family: the 0.99 quantile, numpy.quantile's linear rule (position 0.99 x 499 = 494.01).
  std::vector<double> one = d[0];
  const auto single = joint_limits({one}, 0.99);
  std::sort(one.begin(), one.end());
  CHECK(single[0] == doctest::Approx(one[494] + 0.01 * (one[495] - one[494])).epsilon(1e-12));
}

TEST_CASE("a model abstains on processing its camera photos never showed, and says why") {
  Applicability a;
  FamilyReference r;
  r.family = "noise";
  r.columns = {0};
  r.mean = {0.0};
  r.basis = {1.0};
  r.variances = {1.0};
  r.limit = 3.0;
  a.families.push_back(r);
  for (int i = 0; i < 6; ++i) {
    ProcessingEvidence jpeg;
    jpeg.jpeg_quality = 90;
    a.camera += jpeg;
  }
  ProcessingEvidence palette;
  palette.quantised = true;
  ProcessingEvidence webp;
  webp.lossy_webp = true;
  ProcessingEvidence strong_jpeg;
  strong_jpeg.jpeg_quality = 50;
  ProcessingEvidence usual_jpeg;
  usual_jpeg.jpeg_quality = 88;
  ProcessingEvidence resampled;
  resampled.resampling.detected = true;
  resampled.resampling.frequency = 1.0 / 3.0;

  CHECK(check_domain(a, {0.5}, &usual_jpeg).reasons.empty());
  CHECK(check_domain(a, {0.5}, &palette).reasons.at(0).starts_with("palette or few-colour image"));
  CHECK(check_domain(a, {0.5}, &webp).reasons.at(0).starts_with("lossy WebP"));
  CHECK(check_domain(a, {0.5}, &strong_jpeg).reasons.at(0).starts_with("JPEG quality about 50"));
  const auto up = check_domain(a, {0.5}, &resampled);
  REQUIRE(up.reasons.size() == 1);
  CHECK(up.reasons[0].find("1.50") != std::string::npos);  // Kirchner: 1 / (1 - 1/3)
  const auto far = check_domain(a, {4.0}, nullptr);
  CHECK_FALSE(far.in_domain);
  CHECK(far.families_out == std::vector<std::string>{"noise"});
  CHECK(far.distance.at("noise") == doctest::Approx(4.0));

  // The JSON round trip keeps everything the check uses.
  const Applicability back = applicability_from_json(nlohmann::json(applicability_to_json(a)));
  CHECK(back.camera.jpeg_quality.at(90) == 6);
  CHECK(back.families.at(0).limit == 3.0);
  CHECK(check_domain(back, {0.5}, &palette).reasons.size() == 1);
}

TEST_CASE("a damaged file and a weakened one are inconclusive, with the reason first and in words") {
  Applicability a;
  // 200 camera photos stored losslessly with fine detail 1.00 .. 2.99 grey levels, and 100 JPEG
  // q70 copies with 0.50 .. 0.99: the floor for a lossless image pools all 300 (compression only
  // removes detail), for a q70 JPEG only the 100 copies.
  for (int i = 0; i < 200; ++i) {
    ProcessingEvidence e;
    e.fine_detail = 1.0 + i / 100.0;
    a.camera += e;
  }
  for (int i = 0; i < 100; ++i) {
    ProcessingEvidence e;
    e.jpeg_quality = 70;
    e.fine_detail = 0.5 + i / 200.0;
    add_fine_detail(a.camera, e);
  }
  CHECK(a.camera.images == 200);  // copies add fine detail only
  // 1 % of 300 is 3: the 4th lowest (0.515) sits in the bin [10^(-29/100), 10^(-28/100)).
  const auto lossless = fine_detail_floor(a.camera, 3, 0.01, 5);
  REQUIRE(lossless);
  CHECK(*lossless == doctest::Approx(std::pow(10.0, -0.29)));
  CHECK(fine_detail_floor(a.camera, 0, 0.01, 5).has_value());
  CHECK_FALSE(fine_detail_floor(a.camera, 0, 0.01, 101).has_value());  // under the support needed
  // At most floor(0.01 n) camera photos lie below the floor, by construction.
  CHECK(*lossless <= 0.515);
  CHECK(*lossless > 0.505);

  ProcessingEvidence blurred;
  blurred.fine_detail = 0.2;
  const auto weak = check_domain(a, {}, &blurred);
  REQUIRE(weak.reasons.size() == 1);
  CHECK(weak.reasons[0].starts_with(
      "too little fine detail left to judge (blurred, denoised or heavily recompressed): 0.20 grey levels"));
  ProcessingEvidence sharp;
  sharp.fine_detail = 1.5;
  CHECK(check_domain(a, {}, &sharp).reasons.empty());
  CHECK(compression_fidelity(sharp) == 3);
  ProcessingEvidence q95;
  q95.jpeg_quality = 95;
  CHECK(compression_fidelity(q95) == 2);

  ProcessingEvidence broken = sharp;
  broken.decoder_warnings = {
      {"note", "libpng: iCCP: known incorrect sRGB profile"},
      {"damaged", "libjpeg: Corrupt JPEG data: 300 extraneous bytes before marker 0xd9"}};
  broken.damaged = true;
  const auto d = check_domain(a, {}, &broken);
  REQUIRE(d.reasons.size() == 1);
  CHECK(d.reasons[0] ==
        "the file is damaged: libjpeg: Corrupt JPEG data: 300 extraneous bytes before marker 0xd9");
  ProcessingEvidence noted = sharp;
  noted.decoder_warnings = {{"note", "libpng: iCCP: known incorrect sRGB profile"}};
  CHECK(check_domain(a, {}, &noted).reasons.empty());  // a benign note changes nothing

  // The fine-detail profile survives the model file; a model from before it has no floor.
  const Applicability back = applicability_from_json(nlohmann::json(applicability_to_json(a)));
  CHECK(fine_detail_floor(back.camera, 3, 0.01, 5) == lossless);
  auto old = nlohmann::json(applicability_to_json(a));
  old["processing"]["camera"].erase("fine_detail_log10_centi");
  CHECK(check_domain(applicability_from_json(old), {}, &blurred).reasons.empty());
}

TEST_CASE(
    "the promised threshold flags the most camera images whose Clopper-Pearson bound stays under target") {
  // 1000 camera images, each its own group, out-of-fold scores 0.000 .. 0.999, and 50 generated.
  // scipy.stats.beta.ppf(0.95, k + 1, 1000 - k): k = 4 -> 0.00913 (<= 1 %), k = 5 -> 0.01048 (> 1 %),
  // so four camera images may be flagged and the threshold is the 4th highest camera score, 0.996.
  std::vector<double> p;
  std::vector<int> labels, groups;
  for (int i = 0; i < 1000; ++i) {
    p.push_back(i / 1000.0);
    labels.push_back(0);
    groups.push_back(i);
  }
  for (int i = 0; i < 50; ++i) {
    p.push_back(0.9995);
    labels.push_back(1);
    groups.push_back(1000 + i);
  }
  const auto ref4 = test::numbers(test::python("applicability_reference.py", {"cp", "4", "1000", "0.95"}));
  const auto ref5 = test::numbers(test::python("applicability_reference.py", {"cp", "5", "1000", "0.95"}));
  REQUIRE(ref4[0] <= 0.01);
  REQUIRE(ref5[0] > 0.01);
  auto [threshold, promise] = promised_threshold(p, labels, groups, 0.01, 0.95);
  CHECK(threshold == doctest::Approx(0.996));
  CHECK(promise.met);
  CHECK(promise.false_positive_images == 4);
  CHECK(promise.false_positive_groups == 4);
  CHECK(promise.bound == doctest::Approx(ref4[0]).epsilon(1e-9));
  CHECK(promise.groups_needed == 0);

  // The same images in 100 groups of ten: the bound over groups, with none flagged, is
  // 1 - 0.05^(1/100) = 2.95 % > 1 %: no promise, the threshold above every camera score, and
  // 299 - 100 = 199 more groups needed.
  for (int i = 0; i < 1000; ++i) groups[static_cast<size_t>(i)] = i / 10;
  std::tie(threshold, promise) = promised_threshold(p, labels, groups, 0.01, 0.95);
  CHECK_FALSE(promise.met);
  CHECK(threshold > 0.999);
  CHECK(threshold < 0.9991);
  CHECK(promise.bound == doctest::Approx(1 - std::pow(0.05, 0.01)).epsilon(1e-9));
  CHECK(promise.groups_needed == 199);
  CHECK(promise.false_positive_images == 0);

  // Ties are flagged together: ten camera images sharing the top score cannot be split.
  for (int i = 990; i < 1000; ++i) p[static_cast<size_t>(i)] = 0.995;
  for (int i = 0; i < 1000; ++i) groups[static_cast<size_t>(i)] = i;
  std::tie(threshold, promise) = promised_threshold(p, labels, groups, 0.01, 0.95);
  CHECK(promise.met);
  CHECK(promise.false_positive_images == 0);
  CHECK(threshold > 0.995);
}
