// Calibration on held-out camera photos and the camera tail (conformal.hpp): the conformal p-value
// against its definition, a brute-force count and its validity on exchangeable data; its bound
// against scipy; the threshold's promise recomputed from the images it was set on; guarded images;
// a model recalibrated on its own out-of-fold scores; the model file with and without a tail.
#include <doctest/doctest.h>

#include <algorithm>
#include <map>
#include <random>
#include <set>

#include "residue/training/calibrate.hpp"
#include "residue/training/conformal.hpp"
#include "residue/training/trainer.hpp"
#include "simulated_items.hpp"
#include "support.hpp"

using namespace residue;

namespace {

// Made-up calibration images (this test's own): camera margins N(-1, 1), generated N(1.5, 1),
// groups of one to three images, p from a fixed sigmoid.
std::vector<CalibrationImage> simulated(size_t camera, size_t generated, unsigned seed,
                                        double guarded_share = 0.0) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> cam(-1.0, 1.0);
  std::normal_distribution<double> gen(1.5, 1.0);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::vector<CalibrationImage> out;
  int group = 0;
  for (size_t i = 0; i < camera + generated; ++i) {
    CalibrationImage im;
    im.label = i < camera ? 0 : 1;
    im.margin = im.label == 0 ? cam(rng) : gen(rng);
    im.p = 1.0 / (1.0 + std::exp(-2.0 * im.margin));
    if (u(rng) < 0.6) ++group;  // about 1.7 images a group
    im.group = group;
    im.guarded = u(rng) < guarded_share;
    im.sha256 = std::to_string(i);
    im.path = std::to_string(i) + ".png";
    out.push_back(im);
  }
  return out;
}

}  // namespace

TEST_CASE("camera tail: k, groups and the conformal p-value equal a brute-force count") {
  const auto images = simulated(400, 100, 7);
  const CameraTail tail = CameraTail::of(images, "test", 0.95);
  REQUIRE(tail.margins.size() == 400);
  std::mt19937 rng(8);
  std::uniform_real_distribution<double> probe(-4.0, 3.0);
  std::vector<double> probes = {tail.margins.front(), tail.margins.back(), tail.margins[17], 10.0, -10.0};
  for (int i = 0; i < 200; ++i) probes.push_back(probe(rng));
  for (const double m : probes) {
    size_t k = 0;
    std::set<int> groups, all_groups;
    for (const auto& im : images) {
      if (im.label != 0) continue;
      all_groups.insert(im.group);
      if (im.margin >= m) {
        ++k;
        groups.insert(im.group);
      }
    }
    const TailPosition t = tail.position(m);
    CHECK(t.at_least == k);
    CHECK(t.images == 400);
    CHECK(t.groups_at_least == groups.size());
    CHECK(t.groups == all_groups.size());
    // Definition of the conformal p-value (Vovk, Gammerman & Shafer 2005, ch. 2; section numbers
    // from memory): p = (1 + #{calibration scores >= s}) / (n + 1).
    CHECK(t.p_value == doctest::Approx((1.0 + static_cast<double>(k)) / 401.0).epsilon(1e-15));
  }
  // Copies and generated images never enter the tail.
  auto with_copy = images;
  CalibrationImage copy = images[0];
  copy.copy = true;
  copy.margin = 99.0;
  with_copy.push_back(copy);
  CHECK(CameraTail::of(with_copy, "test", 0.95).position(50.0).at_least == 0);
}

TEST_CASE("camera tail: the conformal p-value is valid on exchangeable camera scores, P(p <= a) <= a") {
  // Validity of the conformal p-value (Vovk et al. 2005, ch. 2; the proposition's number not
  // recalled, stated from memory): for a new
  // camera score exchangeable with n calibration scores, P(p-value <= a) <= a. Monte Carlo on this
  // test's own Gaussian draws: 4000 trials of n = 99, so P(p <= a) is exactly floor(a (n+1)) / (n+1)
  // without ties; checked within 3 binomial standard errors.
  std::mt19937 rng(11);
  std::normal_distribution<double> draw(0.0, 1.0);
  const int trials = 4000;
  const double alphas[] = {0.05, 0.1, 0.25};
  int hits[3] = {0, 0, 0};
  for (int t = 0; t < trials; ++t) {
    std::vector<CalibrationImage> images(99);
    for (size_t i = 0; i < images.size(); ++i) {
      images[i].margin = draw(rng);
      images[i].group = static_cast<int>(i);
    }
    const double p = CameraTail::of(images, "mc", 0.95).position(draw(rng)).p_value;
    for (int a = 0; a < 3; ++a) hits[a] += p <= alphas[a] + 1e-12 ? 1 : 0;
  }
  for (int a = 0; a < 3; ++a) {
    const double share = static_cast<double>(hits[a]) / trials;
    const double se = std::sqrt(alphas[a] * (1 - alphas[a]) / trials);
    CHECK(share <= alphas[a] + 3 * se);
    CHECK(share >= alphas[a] - 3 * se - 0.01);  // not lax either: floor(a * 100) / 100 = a here
  }
}

TEST_CASE("camera tail: the upper bound is scipy.stats.beta.ppf(0.95, k + 1, n - k)") {
  const auto images = simulated(250, 0, 9);
  const CameraTail tail = CameraTail::of(images, "test", 0.95);
  for (const size_t k : {0UL, 1UL, 3UL, 40UL}) {
    const TailPosition t = tail.position(tail.margins[k == 0 ? 0 : k - 1] + (k == 0 ? 1.0 : 0.0));
    REQUIRE(t.at_least == k);
    const auto ref =
        test::numbers(test::python("applicability_reference.py", {"cp", std::to_string(k), "250", "0.95"}));
    REQUIRE(ref.size() == 2);
    CHECK(t.upper_bound == doctest::Approx(ref[1]).epsilon(1e-9));  // scipy.stats.beta.ppf
  }
  CHECK(tail_text(tail.position(tail.margins[2])).starts_with("3 of 250 calibration camera photos ("));
}

TEST_CASE("calibrated threshold: the promise printed is the promise recomputed from the images") {
  for (const double guarded_share : {0.0, 0.2}) {
    const auto images = simulated(1500, 300, 12, guarded_share);
    const CalibrationSettings settings{0.01, 0.95, 0.05};
    const Calibrated c = calibrate_thresholds(images, settings, "held-out");
    // Recount from the definition: camera images with p >= t and not guarded, their groups.
    size_t n = 0, k = 0;
    std::set<int> groups, flagged_groups;
    for (const auto& im : images) {
      if (im.label != 0) continue;
      ++n;
      groups.insert(im.group);
      if (im.p >= c.likely_generated && !im.guarded) {
        ++k;
        flagged_groups.insert(im.group);
      }
    }
    CHECK(c.promise.camera_images == n);
    CHECK(c.promise.camera_groups == groups.size());
    CHECK(c.promise.false_positive_images == k);
    CHECK(c.promise.false_positive_groups == flagged_groups.size());
    const double bound = std::max(clopper_pearson_upper(k, n, 0.95),
                                  clopper_pearson_upper(flagged_groups.size(), groups.size(), 0.95));
    CHECK(c.promise.bound == doctest::Approx(bound).epsilon(1e-12));
    CHECK(c.promise.met == (bound <= 0.01));
    REQUIRE(c.promise.met);  // 1500 images in about 900 groups can promise 1 %
    // The lowest such threshold: the next unguarded camera score below it breaks the promise.
    double next = -1.0;
    for (const auto& im : images) {
      if (im.label == 0 && !im.guarded && im.p < c.likely_generated) next = std::max(next, im.p);
    }
    size_t k2 = k;
    std::set<int> g2 = flagged_groups;
    for (const auto& im : images) {
      if (im.label == 0 && !im.guarded && im.p == next) {
        ++k2;
        g2.insert(im.group);
      }
    }
    CHECK(std::max(clopper_pearson_upper(k2, n, 0.95),
                   clopper_pearson_upper(g2.size(), groups.size(), 0.95)) > 0.01);
    // Likely-camera: at most 5 % of the generated images fall below it unguarded.
    REQUIRE(c.likely_camera.has_value());
    size_t below = 0, generated = 0;
    for (const auto& im : images) {
      if (im.label != 1) continue;
      ++generated;
      below += im.p < *c.likely_camera && !im.guarded ? 1 : 0;
    }
    CHECK(static_cast<double>(below) <= 0.05 * static_cast<double>(generated));
    CHECK(*c.likely_camera <= c.likely_generated);
    CHECK(c.record.camera_images == n);
    CHECK(c.record.generated_images == 300);
  }
}

TEST_CASE("likely-camera threshold: the promise holds for each kind of processed copy, not just pooled") {
  // 300 generated originals scoring high, and a JPEG copy and a downscaled copy of each; the JPEG
  // copies score lower (processing weakens the traces). Pooled, 5 % of 900 would let 45 images
  // under the threshold, all of them JPEG copies (15 % of that kind); per kind, at most m of each,
  // m the largest count whose 95 % Clopper-Pearson bound over 300 stays within 5 %.
  auto images = simulated(1500, 300, 5);
  std::vector<CalibrationImage> copies;
  for (const auto& im : images) {
    if (im.label != 1) continue;
    for (const char* transform : {"jpeg-q83", "downscale-0.72"}) {
      CalibrationImage c = im;
      c.copy = true;
      c.copy_kind = transform_kind(transform);
      if (c.copy_kind == "jpeg") c.p = std::max(0.0, c.p - 0.3);
      copies.push_back(c);
    }
  }
  images.insert(images.end(), copies.begin(), copies.end());
  const Calibrated c = calibrate_thresholds(images, {0.01, 0.95, 0.05}, "held-out");
  REQUIRE(c.likely_camera.has_value());
  std::map<std::string, std::pair<size_t, size_t>> below;  // kind -> (under the threshold, all)
  for (const auto& im : images) {
    if (im.label != 1) continue;
    auto& [under, all] = below[im.copy ? im.copy_kind : "original"];
    under += im.p < *c.likely_camera ? 1 : 0;
    ++all;
  }
  REQUIRE(below.size() == 3);
  for (const auto& entry : below) {
    CAPTURE(entry.first);
    CHECK(static_cast<double>(entry.second.first) <= 0.05 * static_cast<double>(entry.second.second));
  }
  // The JPEG copies set it: one more of them would break that kind's promise (the bounds from
  // scipy.stats.binomtest's exact interval, tests/reference/applicability_reference.py).
  const size_t m = below.at("jpeg").first;
  const auto at_m =
      test::numbers(test::python("applicability_reference.py", {"cp", std::to_string(m), "300", "0.95"}));
  const auto past_m =
      test::numbers(test::python("applicability_reference.py", {"cp", std::to_string(m + 1), "300", "0.95"}));
  CHECK(at_m[0] <= 0.05);
  CHECK(past_m[0] > 0.05);
  CHECK(m > 0);
  CHECK(c.record.likely_camera_set_by == "jpeg");
  CHECK(c.record.likely_camera_images == 300);
  CHECK(c.record.likely_camera_bound == doctest::Approx(at_m[0]).epsilon(1e-9));
}

TEST_CASE("transform kinds drop the parameter") {
  CHECK(transform_kind("jpeg-q83") == "jpeg");
  CHECK(transform_kind("webp-q70") == "webp");
  CHECK(transform_kind("downscale-0.72") == "downscale");
  CHECK(transform_kind("crop-centre-0.6") == "crop-centre");
  CHECK(transform_kind("as-published") == "as-published");
  CHECK(transform_kind("print-scan") == "print-scan");
}

TEST_CASE("calibrated threshold: guarded camera photos are counted but never flagged") {
  auto images = simulated(400, 0, 13);
  // The highest camera score, guarded, cannot be a false positive: the threshold may go below it.
  auto top =
      std::max_element(images.begin(), images.end(), [](const auto& a, const auto& b) { return a.p < b.p; });
  const Calibrated before = calibrate_thresholds(images, {0.01, 0.95, 0.05}, "held-out");
  top->guarded = true;
  const Calibrated after = calibrate_thresholds(images, {0.01, 0.95, 0.05}, "held-out");
  CHECK(after.promise.camera_images == 400);
  CHECK(after.likely_generated < before.likely_generated);
  CHECK(after.record.camera_guarded == 1);
  CHECK(after.record.supported_threshold <= top->p);
}

TEST_CASE("calibrated threshold: too few groups say what is supported and what is needed") {
  const auto images = simulated(60, 0, 14);
  const Calibrated c = calibrate_thresholds(images, {0.01, 0.95, 0.05}, "held-out");
  CHECK_FALSE(c.promise.met);
  // Nothing flagged: the bound is 1 - 0.05^(1/G) over the groups (Clopper-Pearson, k = 0).
  CHECK(c.record.supported_fpr ==
        doctest::Approx(1 - std::pow(0.05, 1.0 / static_cast<double>(c.promise.camera_groups))));
  CHECK(c.promise.groups_needed == 299 - c.promise.camera_groups);
  Thresholds t;
  t.likely_generated = c.likely_generated;
  t.promise = c.promise;
  const std::string advice = promise_text(t);
  CHECK(advice.find("What they support: at most") != std::string::npos);
  CHECK(advice.find(" more independent camera groups") != std::string::npos);
  CHECK(advice.find("--target-fpr") != std::string::npos);
  CHECK_FALSE(c.likely_camera.has_value());  // no generated images: the model's is kept
}

TEST_CASE(
    "a model recalibrated on its own out-of-fold scores gets the thresholds and tail training gave it") {
  // Simulated cached vectors (this test's own): 150 images, one in three generated.
  const auto items = test::simulated_items(150, 31, 7, 0.4);
  TrainSettings settings;
  settings.augment = Augment::kNone;
  auto trained = train_model(items, settings, audit_dataset(items, 0));
  REQUIRE(trained.ok());
  const auto groups = assign_groups(items, settings.group_by);
  std::vector<CalibrationImage> oof(items.size());
  for (size_t i = 0; i < items.size(); ++i) {
    oof[i].p = trained->cv.probabilities[i];
    oof[i].margin = trained->cv.margins[i];
    oof[i].label = items[i].file.label == Label::kGenerated ? 1 : 0;
    oof[i].group = groups[i];
    oof[i].sha256 = items[i].sha256;
    oof[i].path = items[i].file.path;
  }
  Model again = trained->model;
  apply_calibration(again, calibrate_thresholds(oof, {0.01, 0.95, 0.05}, "out-of-fold"), 0.01, 0.05);
  const Model& m = trained->model;
  CHECK(again.thresholds.likely_generated == m.thresholds.likely_generated);
  CHECK(again.thresholds.likely_camera == m.thresholds.likely_camera);
  CHECK(again.thresholds.promise->bound == m.thresholds.promise->bound);
  REQUIRE(m.camera_tail.has_value());
  CHECK(again.camera_tail->margins == m.camera_tail->margins);
  CHECK(again.camera_tail->groups == m.camera_tail->groups);
  CHECK(again.calibration_set->digest == m.calibration_set->digest);

  SUBCASE("the model file keeps tail and record; a file without them still loads") {
    auto loaded = model_from_json(nlohmann::json::parse(model_to_json(m).dump()));
    REQUIRE(loaded.ok());
    REQUIRE(loaded->camera_tail.has_value());
    CHECK(loaded->camera_tail->margins == m.camera_tail->margins);
    CHECK(loaded->camera_tail->position(0.3).at_least == m.camera_tail->position(0.3).at_least);
    CHECK(loaded->calibration_set->camera_images == 100);
    auto old = nlohmann::json::parse(model_to_json(m).dump());
    old.erase("camera_tail");
    old.erase("calibration_set");
    auto loaded_old = model_from_json(old);
    REQUIRE(loaded_old.ok());
    CHECK_FALSE(loaded_old->camera_tail.has_value());
    auto damaged = nlohmann::json::parse(model_to_json(m).dump());
    damaged["camera_tail"]["margins"][0] = -1e9;  // no longer descending
    CHECK_FALSE(model_from_json(damaged).ok());
  }
}
