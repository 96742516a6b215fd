// Training's camera model (camera_model.hpp): the camera-only density out of fold beside the
// two-class SVM, what it did there, and training on camera photos alone. docs/training.md,
// "The camera model".
#include <algorithm>
#include <cmath>
#include <tuple>

#include "trainer_parts.hpp"

namespace residue::detail {

namespace {

// The median and the interquartile range / 1.349 (a normal law's standard deviation) of `v`, the
// spread floored at 1e-9. numpy.quantile's linear interpolation.
std::pair<double, double> robust_location(std::vector<double> v) {
  if (v.empty()) return {0.0, 1.0};
  std::sort(v.begin(), v.end());
  auto q = [&](double p) {
    const double at = p * static_cast<double>(v.size() - 1);
    const auto lo = static_cast<size_t>(std::floor(at));
    const size_t hi = std::min(lo + 1, v.size() - 1);
    return v[lo] + (at - static_cast<double>(lo)) * (v[hi] - v[lo]);
  };
  return {q(0.5), std::max((q(0.75) - q(0.25)) / 1.349, 1e-9)};
}

// The empirical distribution function of the camera photos' values: the share strictly below x.
std::vector<double> camera_ranks(const std::vector<double>& values, const std::vector<int>& labels) {
  std::vector<double> camera;
  for (size_t i = 0; i < values.size(); ++i) {
    if (labels[i] == 0) camera.push_back(values[i]);
  }
  std::sort(camera.begin(), camera.end());
  std::vector<double> out(values.size());
  for (size_t i = 0; i < values.size(); ++i) {
    const auto below = std::lower_bound(camera.begin(), camera.end(), values[i]) - camera.begin();
    out[i] = camera.empty() ? 0.0 : static_cast<double>(below) / static_cast<double>(camera.size());
  }
  return out;
}

nlohmann::ordered_json metrics_with_generators(const EvaluationReport& r) {
  nlohmann::ordered_json per = nlohmann::ordered_json::object();
  for (const auto& [g, m] : r.per_generator)
    per[g] = {{"roc_auc", m.roc_auc}, {"tpr_at_fpr_1pct", m.tpr_at_fpr_1}};
  const MetricSet& o = r.overall;
  return {{"overall",
           {{"camera", o.camera},
            {"generated", o.generated},
            {"roc_auc", o.roc_auc},
            {"tpr_at_fpr_1pct", o.tpr_at_fpr_1},
            {"tpr_at_fpr_5pct", o.tpr_at_fpr_5}}},
          {"per_generator", per}};
}

}  // namespace

// The camera-only density on the model's features (camera_model.hpp), fitted without a generated
// image: sets model.camera_only (the density on every camera instance, the tail of the camera
// photos' out-of-fold scores) and returns every instance's out-of-fold score.
std::vector<double> fit_camera_only(Model& model, const Instances& instances,
                                    const std::vector<int>& labels_all, const std::vector<int>& fold_all,
                                    const std::vector<int>& groups_all, int k, size_t n,
                                    const TrainSettings& settings) {
  std::vector<std::vector<double>> rows(instances.size(), std::vector<double>(model.feature_index.size()));
  for (size_t i = 0; i < instances.size(); ++i) {
    for (size_t c = 0; c < model.feature_index.size(); ++c)
      rows[i][c] = instances[i]->features.values[model.feature_index[c]];
  }
  auto fit = fit_camera_density(rows, labels_all, fold_all, k, model.families, settings.jobs);
  CameraOnly camera;
  // Robust location and spread of the camera photos' gap and log density, out of fold.
  std::vector<double> gaps, densities;
  for (size_t i = 0; i < n; ++i) {
    if (labels_all[i] != 0) continue;
    gaps.push_back(image_gap(instances[i]->features.values));
    densities.push_back(std::log(std::max(fit.out_of_fold[i], 1e-12)));
  }
  std::tie(camera.gap_median, camera.gap_spread) = robust_location(gaps);
  std::tie(camera.density_median, camera.density_spread) = robust_location(densities);
  std::vector<double> scores(instances.size());
  for (size_t i = 0; i < instances.size(); ++i)
    scores[i] = camera.combine(image_gap(instances[i]->features.values), fit.out_of_fold[i]);
  std::vector<CalibrationImage> photos;
  for (size_t i = 0; i < n; ++i) {
    if (labels_all[i] != 0) continue;
    CalibrationImage im;
    im.margin = scores[i];
    im.group = groups_all[i];
    im.sha256 = instances[i]->sha256;
    im.path = instances[i]->file.path;
    photos.push_back(std::move(im));
  }
  camera.density = std::move(fit.density);
  camera.tail = CameraTail::of(photos, "out-of-fold training camera photos", settings.fpr_confidence);
  model.camera_only = std::move(camera);
  return scores;
}

// What the camera-only score did out of fold, alone and beside the two-class score (docs/quality.md):
// its ranking; the ranking of the larger of the two scores' camera ranks; and the images the
// two-class score put in likely-camera that the camera-only score calls unusual.
nlohmann::ordered_json camera_only_provenance(const Model& model, const std::vector<double>& oof_all,
                                              const CrossValidation& cv, const std::vector<int>& labels,
                                              const std::vector<std::string>& generators) {
  const size_t n = labels.size();
  const std::vector<double> scores(oof_all.begin(), oof_all.begin() + static_cast<std::ptrdiff_t>(n));
  const auto camera_rank = camera_ranks(scores, labels);
  const auto two_class_rank = camera_ranks(cv.margins, labels);
  std::vector<double> fused(n);
  for (size_t i = 0; i < n; ++i) fused[i] = std::max(camera_rank[i], two_class_rank[i]);
  size_t generated_camera_band = 0, generated_unusual = 0, camera_camera_band = 0, camera_unusual = 0;
  for (size_t i = 0; i < n; ++i) {
    if (cv.probabilities[i] >= model.thresholds.likely_camera) continue;
    const bool unusual = model.camera_only->tail->position(scores[i]).p_value <= model.camera_only->unusual;
    (labels[i] == 1 ? generated_camera_band : camera_camera_band) += 1;
    if (unusual) (labels[i] == 1 ? generated_unusual : camera_unusual) += 1;
  }
  return {{"method", "coding-surprise-gap-and-ppca-per-family-camera-only"},
          {"alone", metrics_with_generators(evaluate_scores(camera_rank, labels, generators, 2.0))},
          {"larger_camera_rank_with_two_class",
           metrics_with_generators(evaluate_scores(fused, labels, generators, 2.0))},
          {"likely_camera_out_of_fold",
           {{"generated", generated_camera_band},
            {"generated_unusual", generated_unusual},
            {"camera", camera_camera_band},
            {"camera_unusual", camera_unusual}}}};
}

// Training on camera photos alone (settings.camera_only): the camera-only score is the margin,
// mapped to [0, 1] by a fixed logistic on the out-of-fold camera scores (median and robust spread:
// p is the score's place among camera photos, not a probability of generation); thresholds and
// camera tail from the out-of-fold camera scores; no likely-camera band.
Result<TrainOutcome> train_camera_only(const std::vector<PreparedItem>& items,
                                       const std::vector<PreparedItem>& copies,
                                       const std::vector<size_t>& columns, const CameraPixelModel& pixels,
                                       const TrainSettings& settings, const AuditReport& audit) {
  const size_t n = items.size();
  const auto generated = static_cast<size_t>(
      std::count_if(items.begin(), items.end(), [](const PreparedItem& it) { return label_of(it) == 1; }));
  if (generated > 0) {
    return make_error(ErrorCode::kUnsupported,
                      "camera-only training takes camera photos only, and " + std::to_string(generated) +
                          " generated images were given: leave out --camera-only to learn from them");
  }
  if (n < 10) return make_error(ErrorCode::kTooSmall, "camera-only training needs at least 10 camera photos");
  Instances instances;
  for (const auto& it : items) instances.push_back(&it);
  for (const auto& c : copies) instances.push_back(&c);
  TrainOutcome out;
  CrossValidation& cv = out.cv;
  const std::vector<int> labels(n, 0);
  const std::vector<int> labels_all(instances.size(), 0);
  auto plan = plan_folds(items, copies, labels, settings, cv);
  if (!plan) return plan.error();
  const int k = plan->k;
  const std::vector<int>& fold_all = plan->fold_all;
  const std::vector<int>& groups_all = plan->groups_all;
  Model& model = out.model;
  model.kind = "camera-only";
  model.extractor_version = std::string(kExtractorVersion);
  model.schema_id = feature_schema_id();
  model.feature_index = columns;
  for (size_t c : columns) {
    model.features.push_back(feature_names()[c]);
    model.families.push_back(feature_families()[c]);
  }
  model.camera_pixels = pixels;
  auto oof = fit_camera_only(model, instances, labels_all, fold_all, groups_all, k, n, settings);
  std::tie(model.camera_only->score_median, model.camera_only->score_spread) =
      robust_location(std::vector<double>(oof.begin(), oof.begin() + static_cast<std::ptrdiff_t>(n)));
  size_t unusual = 0;  // camera photos out of fold at or below the unusual p-value
  for (size_t i = 0; i < n; ++i)
    unusual += model.camera_only->tail->position(oof[i]).p_value <= model.camera_only->unusual;
  for (double& m : oof) m = model.camera_only->margin(m);
  model.scaler = model.camera_only->density->scaler;
  model.linear.weights.assign(columns.size(), 0.0);
  model.linear.bias = 0.0;
  model.calibration.a = -1.0;
  model.calibration.b = 0.0;
  model.training_prior = 0.5;
  std::vector<double> p_all;
  p_all.reserve(oof.size());
  for (double s : oof) p_all.push_back(model.calibration.probability(s));
  apply_calibration(
      model,
      calibrate_thresholds(out_of_fold_calibration(instances, p_all, oof, labels_all, groups_all, n),
                           {settings.target_fpr, settings.fpr_confidence, settings.generated_miss},
                           "out-of-fold"),
      settings.target_fpr, settings.generated_miss);
  model.thresholds.likely_camera = 0.0;
  cv.margins.assign(oof.begin(), oof.begin() + static_cast<std::ptrdiff_t>(n));
  cv.probabilities.assign(p_all.begin(), p_all.begin() + static_cast<std::ptrdiff_t>(n));
  cv.report = evaluate_scores(cv.probabilities, labels, std::vector<std::string>(n, "camera"),
                              model.thresholds.likely_generated);
  model.created = utc_now();
  if (model.calibration_set) model.calibration_set->created = model.created;
  const std::vector<std::string> files = training_file_keys(items);
  model.provenance = {
      {"counts",
       {{"camera", n},
        {"generated", 0},
        {"per_generator", nlohmann::ordered_json::object()},
        {"augmented_copies", copies.size()}}},
      {"settings", settings_to_json(settings)},
      {"audit_warnings", audit.warnings},
      {"cross_validation",
       {{"folds", k},
        {"groups", cv.groups},
        {"group_by", kGroupNames[static_cast<int>(settings.group_by)]},
        {"instances", "image"},
        {"metrics", report_to_json(cv.report)}}},
      {"camera_only",
       {{"method", "coding-surprise-gap-and-ppca-per-family-camera-only"},
        {"note",
         "No generated image was seen: the model scores how unusual an image is for a camera photo. "
         "p_generated is that score's place among camera photos, not a probability that the image "
         "was generated, and the model never calls an image likely-camera."},
        {"median_score", model.camera_only->score_median},
        {"score_spread", model.camera_only->score_spread},
        {"camera_unusual_out_of_fold", unusual}}},
      {"training_files", files}};
  stamp_model_id(model);
  return out;
}

}  // namespace residue::detail
