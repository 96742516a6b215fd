// The camera model (camera_model.hpp): the camera-only density against its definition (PPCA per
// family, checked against numpy in test_applicability.cpp), out of fold and blind to generated
// images; camera-only training; the surprise values a model fills; the unusual-for-a-camera reason.
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <random>

#include "residue/training/camera_model.hpp"
#include "residue/training/metrics.hpp"
#include "residue/training/model.hpp"
#include "residue/training/trainer.hpp"
#include "simulated_items.hpp"
#include "support.hpp"

using namespace residue;

namespace {

struct DensityRows {
  std::vector<std::vector<double>> rows;
  std::vector<int> labels;
  std::vector<int> fold;
  std::vector<std::string> families = {"a", "a", "a", "b", "b"};
};

// Camera rows: a correlated Gaussian in family a and an independent one in family b; generated rows
// shifted by `shift` in family b (the tests' own numbers).
DensityRows simulated_rows(size_t n, double shift, unsigned seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> g(0.0, 1.0);
  DensityRows r;
  for (size_t i = 0; i < n; ++i) {
    const bool generated = i % 4 == 0;
    const double a = g(rng);
    r.rows.push_back({a + 0.2 * g(rng), 2 * a + 0.3 * g(rng), g(rng), g(rng) + (generated ? shift : 0.0),
                      g(rng) - (generated ? shift : 0.0)});
    r.labels.push_back(generated ? 1 : 0);
    r.fold.push_back(static_cast<int>(i % 3));
  }
  return r;
}

}  // namespace

TEST_CASE(
    "camera-only density: its score is the root mean square of the per-family PPCA distances, out "
    "of fold, and no generated image moves it") {
  DensityRows r = simulated_rows(240, 3.0, 7);
  const auto fit = fit_camera_density(r.rows, r.labels, r.fold, 3, r.families, 2);
  REQUIRE(fit.density.families.size() == 2);
  // The definition, from the families' own distances.
  for (size_t i = 0; i < 5; ++i) {
    std::vector<double> z(5);
    fit.density.scaler.apply_row(r.rows[i].data(), z.data());
    const double da = fit.density.families[0].distance(z.data());
    const double db = fit.density.families[1].distance(z.data());
    CHECK(fit.density.score(r.rows[i]) == doctest::Approx(std::sqrt((da * da + db * db) / 2)).epsilon(1e-12));
  }
  // Out of fold: row i's score is that of references fitted on the other folds' camera rows (the
  // standardisation is the camera rows' of all folds).
  Matrix z{r.rows.size(), 5, std::vector<double>(r.rows.size() * 5)};
  for (size_t i = 0; i < r.rows.size(); ++i) fit.density.scaler.apply_row(r.rows[i].data(), z.row(i));
  std::vector<size_t> others;
  for (size_t i = 0; i < r.rows.size(); ++i) {
    if (r.fold[i] != 0 && r.labels[i] == 0) others.push_back(i);
  }
  const auto ra = fit_family_reference("a", {0, 1, 2}, FamilyMoments::of(z, {0, 1, 2}, others));
  const auto rb = fit_family_reference("b", {3, 4}, FamilyMoments::of(z, {3, 4}, others));
  for (size_t i = 0; i < 12; ++i) {
    if (r.fold[i] != 0) continue;
    const double da = ra.distance(z.row(i)), db = rb.distance(z.row(i));
    CHECK(fit.out_of_fold[i] == doctest::Approx(std::sqrt((da * da + db * db) / 2)).epsilon(1e-9));
  }
  // Generated rows never enter a fit: moving them changes no camera row's score and not the density.
  DensityRows moved = r;
  for (size_t i = 0; i < moved.rows.size(); ++i) {
    if (moved.labels[i] == 1)
      for (double& v : moved.rows[i]) v += 100.0;
  }
  const auto again = fit_camera_density(moved.rows, moved.labels, moved.fold, 3, moved.families, 1);
  for (size_t i = 0; i < r.rows.size(); ++i) {
    if (r.labels[i] == 0) CHECK(again.out_of_fold[i] == fit.out_of_fold[i]);
  }
  CHECK(again.density.scaler.mean == fit.density.scaler.mean);
  // And it separates the shifted rows it never saw.
  CHECK(roc_auc(fit.out_of_fold, r.labels) > 0.95);
}

TEST_CASE("camera-only training: a working model from camera photos alone") {
  auto all = test::simulated_items(240, 5, 7, 3.0);
  std::vector<PreparedItem> camera;
  for (const auto& it : all) {
    if (it.file.label == Label::kCamera) camera.push_back(it);
  }
  TrainSettings settings;
  settings.camera_only = true;
  settings.augment = Augment::kNone;
  auto trained = train_model(camera, settings, audit_dataset(camera, 0));
  REQUIRE(trained);
  Model& model = trained->model;
  CHECK(model.kind == "camera-only");
  CHECK(model.thresholds.likely_camera == 0.0);
  REQUIRE(model.camera_only);
  REQUIRE(model.camera_only->tail);
  CHECK(model.camera_only->tail->margins.size() == camera.size());
  CHECK(model.provenance["counts"]["generated"] == 0);
  // The gap's location and spread: numpy.quantile's median and interquartile range / 1.349 of the
  // camera photos' gaps (tests/reference/surprise_reference.py).
  std::vector<std::string> gaps;
  for (const auto& it : camera) {
    char buf[40];
    std::snprintf(buf, sizeof buf, "%.17g", image_gap(model_vector(model, it.features).values));
    gaps.emplace_back(buf);
  }
  gaps.insert(gaps.begin(), "quantiles");
  const auto q = test::numbers(test::python("surprise_reference.py", gaps));
  REQUIRE(q.size() == 3);
  CHECK(model.camera_only->gap_median == doctest::Approx(q[1]).epsilon(1e-12));
  CHECK(model.camera_only->gap_spread == doctest::Approx((q[2] - q[0]) / 1.349).epsilon(1e-12));
  // Generated images it never saw score higher than camera photos it never saw.
  std::vector<double> p;
  std::vector<int> y;
  for (const auto& it : test::simulated_items(90, 99, 7, 3.0)) {
    const Score s = score(model, it.features);
    CHECK(s.band != "likely-camera");
    REQUIRE(s.camera_only);
    // The score is the sum of the gap's and the log density's robust z-values, the margin its asinh
    // after centring and scaling on the camera photos (camera_model.hpp).
    const CameraOnly& co = *model.camera_only;
    CHECK(s.margin == doctest::Approx(std::asinh((s.camera_only->score - co.score_median) / co.score_spread))
                          .epsilon(1e-12));
    CHECK(s.p_generated == doctest::Approx(1.0 / (1.0 + std::exp(-s.margin))).epsilon(1e-12));
    CHECK(s.camera_only->score ==
          doctest::Approx((co.gap_median - s.camera_only->gap) / co.gap_spread +
                          (std::log(s.camera_only->density) - co.density_median) / co.density_spread)
              .epsilon(1e-12));
    p.push_back(s.p_generated);
    y.push_back(it.file.label == Label::kGenerated ? 1 : 0);
  }
  CHECK(roc_auc(p, y) > 0.9);
  // The model file gives the same scores, and generated images are refused in camera-only training.
  auto loaded = model_from_json(model_to_json(model));
  REQUIRE(loaded);
  CHECK(score(*loaded, all[1].features).p_generated == score(model, all[1].features).p_generated);
  CHECK_FALSE(train_model(all, settings, audit_dataset(all, 0)));
  auto broken = model_to_json(model);
  broken.erase("camera_only");
  CHECK_FALSE(model_from_json(broken));
}

TEST_CASE(
    "a two-class model fills the surprise values and says when an image is unusual for a camera photo") {
  const auto items = test::simulated_items(150, 3, 5, 2.5);
  TrainSettings settings;
  settings.augment = Augment::kNone;
  auto trained = train_model(items, settings, audit_dataset(items, 0));
  REQUIRE(trained);
  const Model& model = trained->model;
  REQUIRE(model.camera_pixels);
  REQUIRE(model.camera_only);
  CHECK(model.provenance["camera_only"].contains("alone"));
  // The filled values are surprise_values of the vector's statistics.
  const auto& names = feature_names();
  const auto at = static_cast<size_t>(std::find(names.begin(), names.end(), "surprise.stats.full.c0.share") -
                                      names.begin());
  const FeatureVector filled = model_vector(model, items[4].features);
  const auto expected = surprise_values(*model.camera_pixels, items[4].features.values.data() + at);
  for (size_t k = 0; k < expected.size(); ++k)
    CHECK(filled.values[at + kSurpriseStats + k] == doctest::Approx(expected[k]).epsilon(1e-12));
  // An ordinary camera vector is not unusual; one pushed far along the camera side of the SVM is,
  // and is then not stamped likely-camera.
  const Score ordinary = score(model, items[1].features);
  REQUIRE(ordinary.camera_only);
  CHECK_FALSE(ordinary.camera_only->unusual);
  FeatureVector odd = items[1].features;
  for (size_t k = 0; k < model.feature_index.size(); ++k)
    odd.values[model.feature_index[k]] += model.linear.weights[k] < 0 ? 40.0 : -40.0;
  const Score s = score(model, odd);
  REQUIRE(s.camera_only);
  CHECK(s.camera_only->unusual);
  CHECK(s.band == "inconclusive");
  CHECK(std::any_of(s.reasons.begin(), s.reasons.end(),
                    [](const std::string& r) { return r.starts_with("unusual for a camera photo"); }));
  auto loaded = model_from_json(model_to_json(model));
  REQUIRE(loaded);
  CHECK(score(*loaded, odd).camera_only->score == doctest::Approx(s.camera_only->score).epsilon(1e-12));
}
