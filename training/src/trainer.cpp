#include "residue/training/trainer.hpp"

#include <algorithm>
#include <array>
#include <chrono>
#include <cmath>
#include <ctime>
#include <exception>
#include <numeric>
#include <optional>
#include <set>
#include <tuple>

#include "residue/features/fingerprint.hpp"
#include "residue/training/batch.hpp"

namespace residue {

namespace {

// The training instances: the images, then their augmented copies.
using Instances = std::vector<const PreparedItem*>;

int label_of(const PreparedItem& item) { return item.file.label == Label::kGenerated ? 1 : 0; }

std::vector<int> labels_of(const Instances& items, const std::vector<size_t>& rows) {
  std::vector<int> y;
  y.reserve(rows.size());
  for (size_t r : rows) y.push_back(label_of(*items[r]));
  return y;
}

// The vectors an instance contributes to training: its own, or (window-level) up to `cap` of its
// windows, evenly spaced (an instance without window vectors gives its own).
std::vector<const std::vector<double>*> training_rows(const PreparedItem& item, bool windows, size_t cap) {
  const auto& w = item.features.windows;
  if (!windows || w.empty()) return {&item.features.values};
  std::vector<const std::vector<double>*> rows;
  const size_t keep = std::min(cap, w.size());
  for (size_t i = 0; i < keep; ++i) rows.push_back(&w[i * w.size() / keep]);
  return rows;
}

// The training rows of the instances `rows`, standardised by a scaler fitted on them, as the
// solver's float rows.
struct Standardised {
  Scaler scaler;
  FloatRows z;
  std::vector<int> y;
};

Standardised standardise(const Instances& items, const std::vector<size_t>& columns,
                         const std::vector<size_t>& rows, const TrainSettings& settings) {
  std::vector<const double*> vectors;
  Standardised s;
  for (size_t r : rows) {
    for (const auto* v : training_rows(*items[r], settings.window_instances, settings.windows_per_image)) {
      vectors.push_back(v->data());
      s.y.push_back(label_of(*items[r]));
    }
  }
  s.scaler = Scaler::fit(vectors, columns);
  s.z = FloatRows{vectors.size(), columns.size(), std::vector<float>(vectors.size() * columns.size())};
  for (size_t i = 0; i < vectors.size(); ++i) s.scaler.apply_columns(vectors[i], columns, s.z.row(i));
  return s;
}

// An instance's margin under each pooling of kPoolings (image-level: its vector's margin, twice).
const char* const kPoolings[] = {"mean", "top-third"};

std::array<double, 2> pooled_margins(const Scaler& scaler, const LinearModel& linear,
                                     const PreparedItem& item, const std::vector<size_t>& columns,
                                     bool windows) {
  std::vector<double> raw(columns.size());
  std::vector<double> z(columns.size());
  auto margin = [&](const std::vector<double>& v) {
    for (size_t k = 0; k < columns.size(); ++k) raw[k] = v[columns[k]];
    scaler.apply_row(raw.data(), z.data());
    return linear.margin(z.data());
  };
  if (!windows || item.features.windows.empty()) {
    const double m = margin(item.features.values);
    return {m, m};
  }
  std::vector<double> margins;
  for (const auto& w : item.features.windows) margins.push_back(margin(w));
  return {pooled_margin(margins, kPoolings[0]), pooled_margin(margins, kPoolings[1])};
}

const char* const kGroupNames[] = {"duplicates", "folder", "manifest"};

// The applicability reference (applicability.hpp): per family, PPCA on the standardised training
// values; limits from out-of-fold distances (the reference refitted without each fold), so that
// `coverage` of the training images pass every family; the processing profile per class.
Applicability fit_applicability(const Instances& items, const std::vector<int>& labels,
                                const std::vector<int>& fold, int folds, const Model& model, double coverage,
                                int jobs) {
  Matrix z{items.size(), model.feature_index.size(),
           std::vector<double>(items.size() * model.feature_index.size())};
  std::vector<double> raw(model.feature_index.size());
  for (size_t i = 0; i < items.size(); ++i) {
    for (size_t c = 0; c < raw.size(); ++c) raw[c] = items[i]->features.values[model.feature_index[c]];
    model.scaler.apply_row(raw.data(), z.row(i));
  }
  // Per family, references fitted on the other folds measure each fold's rows; the final ones on all.
  std::vector<std::vector<size_t>> fold_rows(static_cast<size_t>(folds));
  for (size_t i = 0; i < items.size(); ++i) {
    if (fold[i] >= 0 && fold[i] < folds) fold_rows[static_cast<size_t>(fold[i])].push_back(i);
  }
  auto fits = fit_families_out_of_fold(z, model.families, fold_rows, fold_rows, jobs);
  auto& references = fits.references;
  const auto& oof = fits.out_of_fold;
  const auto limits = joint_limits(oof, coverage);
  Applicability a;
  a.coverage = coverage;
  for (size_t k = 0; k < references.size(); ++k) {
    a.families.push_back(std::move(references[k]));
    a.families.back().limit = limits[k];
  }
  // The processing profile is the originals': processing that only augmented copies showed does
  // not count as seen, so the guards of check_domain stay (false positives are the worse error).
  // Fine detail is the exception: the everyday copies show how much of it camera photos keep
  // after recompression, downscaling and cropping, which lowers the floor (fewer photos called
  // weakened). The laundering copies (blur, noise, median) do not count: they are what the floor
  // is there to catch.
  for (size_t i = 0; i < items.size(); ++i) {
    auto& counts = labels[i] == 1 ? a.generated : a.camera;
    const std::string kind = transform_kind(items[i]->augmentation);
    if (items[i]->augmentation.empty()) {
      counts += items[i]->facts.processing;
    } else if (kind == "jpeg" || kind == "webp" || kind == "downscale" || kind == "crop-centre") {
      add_fine_detail(counts, items[i]->facts.processing);
    }
  }
  return a;
}

// Histograms of the out-of-fold margins and of each family's contribution and distance under the
// final model; band shares of each class out of fold.
TrainingReference training_reference(const Model& model, const std::vector<PreparedItem>& items,
                                     const std::vector<int>& labels, const CrossValidation& cv) {
  TrainingReference r;
  r.images = items.size();
  r.margin = reference_histogram(cv.margins, labels);
  std::map<std::string, std::vector<double>> contribution, distance;
  for (const auto& item : items) {
    const Score s = score(model, item.features);
    for (const auto& [family, c] : s.contributions) contribution[family].push_back(c);
    for (const auto& [family, d] : s.distances) distance[family].push_back(d);
  }
  for (const auto& [family, values] : contribution) {
    r.contribution[family] = reference_histogram(values, labels);
    r.distance[family] = reference_histogram(distance[family], labels);
  }
  std::array<double, 2> totals{0, 0};
  for (int y : labels) totals[static_cast<size_t>(y)] += 1;
  for (const char* band : {"likely-camera", "inconclusive", "likely-generated"}) {
    r.camera_bands[band] = 0.0;
    r.generated_bands[band] = 0.0;
  }
  for (size_t i = 0; i < items.size(); ++i) {
    auto& bands = labels[i] == 1 ? r.generated_bands : r.camera_bands;
    bands[band_of(model.thresholds, cv.probabilities[i])] += 1.0 / totals[static_cast<size_t>(labels[i])];
  }
  return r;
}

// Grouped k-fold cross-validation over the C grid: per fold, the training rows are standardised
// once and the SVM solved at each C; the test instances' margins go to
// `margins[c][pooling][instance]` (each fold writes only its own instances, so folds run on
// `settings.jobs` threads and the result does not depend on it). `solver[c]` gathers the solver's
// work over the folds.
std::optional<Error> cross_validate(const Instances& instances, const std::vector<size_t>& columns,
                                    const std::vector<int>& fold, int k, const std::vector<double>& c_grid,
                                    const TrainSettings& settings,
                                    std::vector<std::array<std::vector<double>, 2>>& margins,
                                    std::vector<SolverUse>& solver) {
  std::vector<std::optional<Error>> errors(static_cast<size_t>(k));
  std::vector<std::vector<SolverUse>> work(static_cast<size_t>(k), std::vector<SolverUse>(c_grid.size()));
  auto run_fold = [&](int f) -> std::optional<Error> {
    std::vector<size_t> train, test;
    for (size_t i = 0; i < instances.size(); ++i) (fold[i] == f ? test : train).push_back(i);
    if (test.empty()) return std::nullopt;
    const Standardised data = standardise(instances, columns, train, settings);
    for (size_t ci = 0; ci < c_grid.size(); ++ci) {
      SolverReport report;
      auto linear = solve_linear_svm(data.z, data.y, balanced_settings(data.y, c_grid[ci]), &report);
      if (!linear) {
        return Error{linear.error().code, "fold " + std::to_string(f + 1) + " of " + std::to_string(k) +
                                              ": " + linear.error().message +
                                              " (too few images of one class in the other folds)"};
      }
      work[static_cast<size_t>(f)][ci].add(report);
      for (size_t i : test) {
        const auto m =
            pooled_margins(data.scaler, *linear, *instances[i], columns, settings.window_instances);
        margins[ci][0][i] = m[0];
        margins[ci][1][i] = m[1];
      }
    }
    return std::nullopt;
  };
  ordered_parallel<std::optional<Error>>(
      static_cast<size_t>(k), settings.jobs,
      [&](size_t f) -> std::optional<Error> {
        try {
          return run_fold(static_cast<int>(f));
        } catch (const std::exception& e) {  // out of memory, most likely
          return Error{ErrorCode::kInternal, "fold " + std::to_string(f + 1) + ": " + e.what()};
        }
      },
      [&](size_t f, std::optional<Error>& e) { errors[f] = std::move(e); });
  for (auto& e : errors) {
    if (e) return e;
  }
  solver.assign(c_grid.size(), SolverUse{});
  for (const auto& per_fold : work) {
    for (size_t ci = 0; ci < c_grid.size(); ++ci) {
      solver[ci].passes = std::max(solver[ci].passes, per_fold[ci].passes);
      solver[ci].converged = solver[ci].converged && per_fold[ci].converged;
    }
  }
  return std::nullopt;
}

// The out-of-fold scores of every instance as calibration images (copies after the n images).
std::vector<CalibrationImage> out_of_fold_calibration(const Instances& instances,
                                                      const std::vector<double>& p,
                                                      const std::vector<double>& margins,
                                                      const std::vector<int>& labels,
                                                      const std::vector<int>& groups, size_t n) {
  std::vector<CalibrationImage> images(instances.size());
  for (size_t i = 0; i < instances.size(); ++i) {
    CalibrationImage& im = images[i];
    im.p = p[i];
    im.margin = margins[i];
    im.label = labels[i];
    im.group = groups[i];
    im.copy = i >= n;
    if (im.copy) im.copy_kind = transform_kind(instances[i]->augmentation);
    im.sha256 = instances[i]->sha256;
    im.path = instances[i]->file.path;
  }
  return images;
}

// Provenance's "training_files": each image's training_file_key, sorted.
std::vector<std::string> training_file_keys(const std::vector<PreparedItem>& items) {
  std::vector<std::string> files;
  files.reserve(items.size());
  for (const auto& it : items) files.push_back(training_file_key(it.sha256));
  std::sort(files.begin(), files.end());
  return files;
}

// The grouped folds of the images (cv.groups, cv.fold) and of every instance, the copies in their
// image's fold and group.
struct FoldPlan {
  int k = 2;
  std::vector<int> fold_all;    // per instance: the images, then their copies
  std::vector<int> groups_all;  // the same for groups
};

Result<FoldPlan> plan_folds(const std::vector<PreparedItem>& items, const std::vector<PreparedItem>& copies,
                            const std::vector<int>& labels, const TrainSettings& settings,
                            CrossValidation& cv) {
  FoldPlan plan;
  const auto groups = assign_groups(items, settings.group_by);
  cv.groups = static_cast<size_t>(*std::max_element(groups.begin(), groups.end())) + 1;
  if (cv.groups < 2)
    return make_error(ErrorCode::kTooSmall, "all images fall into one group: cannot cross-validate");
  plan.k = std::clamp(settings.folds, 2, static_cast<int>(cv.groups));
  cv.fold = grouped_folds(groups, labels, plan.k);
  plan.fold_all = cv.fold;
  plan.groups_all = groups;
  for (const auto& c : copies) {
    plan.fold_all.push_back(cv.fold[c.source]);
    plan.groups_all.push_back(groups[c.source]);
  }
  return plan;
}

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

}  // namespace

std::string utc_now() {
  const std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

std::string training_file_key(const std::string& sha256) { return sha256.substr(0, 16); }

nlohmann::ordered_json settings_to_json(const TrainSettings& s) {
  return {{"folds", s.folds},
          {"c_grid", s.c_grid},
          {"large_set", s.large_set},
          {"target_fpr", s.target_fpr},
          {"generated_miss", s.generated_miss},
          {"fpr_confidence", s.fpr_confidence},
          {"domain_coverage", s.domain_coverage},
          {"group_by", kGroupNames[static_cast<int>(s.group_by)]},
          {"augment", augment_name(s.augment)},
          {"instances", s.window_instances ? "windows" : "image"},
          {"windows_per_image", s.windows_per_image},
          {"only", s.feature_prefixes},
          {"camera_only", s.camera_only}};
}

TrainSettings settings_from_model(const Model& model) {
  TrainSettings s;
  s.target_fpr = model.thresholds.target_fpr;
  s.generated_miss = model.thresholds.generated_miss;
  const nlohmann::json p =
      model.provenance.is_object() ? nlohmann::json(model.provenance) : nlohmann::json::object();
  const auto cv = p.value("cross_validation", nlohmann::json::object());
  s.folds = cv.value("folds", s.folds);
  std::string group_by = cv.value("group_by", std::string("duplicates"));
  if (p.contains("settings")) {
    const auto& j = p["settings"];
    s.folds = j.value("folds", s.folds);
    s.c_grid = j.value("c_grid", s.c_grid);
    s.large_set = j.value("large_set", s.large_set);
    s.target_fpr = j.value("target_fpr", s.target_fpr);
    s.generated_miss = j.value("generated_miss", s.generated_miss);
    s.fpr_confidence = j.value("fpr_confidence", s.fpr_confidence);
    s.domain_coverage = j.value("domain_coverage", s.domain_coverage);
    group_by = j.value("group_by", group_by);
    s.feature_prefixes = j.value("only", s.feature_prefixes);
    s.camera_only = j.value("camera_only", s.camera_only);
    // Models from before augmentation existed were trained without it.
    s.augment = parse_augment(j.value("augment", std::string("none"))).value_or(Augment::kNone);
    s.window_instances = j.value("instances", std::string("image")) == "windows";
    s.windows_per_image = j.value("windows_per_image", s.windows_per_image);
  }
  for (int g = 0; g < 3; ++g) {
    if (group_by == kGroupNames[g]) s.group_by = static_cast<GroupBy>(g);
  }
  return s;
}

nlohmann::ordered_json lineage_of(const Model& parent, const std::vector<PreparedItem>& items) {
  nlohmann::ordered_json lineage = {{"parent", parent.id}, {"parent_created", parent.created}};
  const nlohmann::json provenance =
      parent.provenance.is_object() ? nlohmann::json(parent.provenance) : nlohmann::json::object();
  const auto old_list = provenance.value("training_files", nlohmann::json::array());
  if (old_list.empty()) {
    lineage["added"] = nullptr;
    lineage["note"] = "the parent model does not list its training files; what was added is unknown";
    return lineage;
  }
  std::set<std::string> old_files;
  for (const auto& h : old_list) old_files.insert(h.get<std::string>());
  const auto old_generators =
      provenance.value("counts", nlohmann::json::object()).value("per_generator", nlohmann::json::object());
  size_t camera = 0, generated = 0;
  std::set<std::string> kept;
  std::map<std::string, size_t> per_generator;
  std::set<std::string> new_generators;
  for (const auto& it : items) {
    const std::string h = training_file_key(it.sha256);
    if (old_files.contains(h)) {
      kept.insert(h);
      continue;
    }
    if (it.file.label == Label::kGenerated) {
      ++generated;
      per_generator[it.file.generator] += 1;
      if (!old_generators.contains(it.file.generator)) new_generators.insert(it.file.generator);
    } else {
      ++camera;
    }
  }
  lineage["added"] = {{"images", camera + generated},
                      {"camera", camera},
                      {"generated", generated},
                      {"per_generator", per_generator},
                      {"new_generators", new_generators}};
  lineage["removed"] = {{"images", old_files.size() - kept.size()}};
  return lineage;
}

Result<TrainOutcome> train_model(const std::vector<PreparedItem>& given_items, const TrainSettings& settings,
                                 const AuditReport& audit, const std::vector<PreparedItem>& given_copies) {
  auto columns = select_features(settings.feature_prefixes);
  if (!columns) return columns.error();
  // The camera pixel model of the surprise family, on the camera instances (photos and copies);
  // then every vector gets the family's derived values from it.
  std::vector<const std::vector<double>*> camera_vectors;
  for (const auto* set : {&given_items, &given_copies}) {
    for (const auto& it : *set) {
      if (label_of(it) == 0) camera_vectors.push_back(&it.features.values);
    }
  }
  if (camera_vectors.size() < 2)
    return make_error(ErrorCode::kTooSmall, "training needs at least two camera images");
  const CameraPixelModel pixels = fit_camera_pixels(camera_vectors);
  std::vector<PreparedItem> items = given_items;
  std::vector<PreparedItem> copies = given_copies;
  for (auto* set : {&items, &copies}) {
    for (auto& it : *set) fill_surprise(pixels, it.features);
  }
  if (settings.camera_only) return train_camera_only(items, copies, *columns, pixels, settings, audit);
  // Instances: the n images, then their copies; a copy shares its image's group and fold.
  Instances instances;
  instances.reserve(items.size() + copies.size());
  for (const auto& it : items) instances.push_back(&it);
  for (const auto& c : copies) instances.push_back(&c);
  const size_t n = items.size();
  std::vector<size_t> all(instances.size());
  for (size_t i = 0; i < all.size(); ++i) all[i] = i;
  const auto labels_all = labels_of(instances, all);
  const std::vector<int> labels(labels_all.begin(), labels_all.begin() + static_cast<std::ptrdiff_t>(n));
  const size_t positives = static_cast<size_t>(std::count(labels.begin(), labels.end(), 1));
  if (positives < 2 || items.size() - positives < 2) {
    return make_error(ErrorCode::kTooSmall, "training needs at least two camera and two generated images");
  }

  TrainOutcome out;
  CrossValidation& cv = out.cv;
  auto plan = plan_folds(items, copies, labels, settings, cv);
  if (!plan) return plan.error();
  const int k = plan->k;
  const std::vector<int>& fold_all = plan->fold_all;
  const std::vector<int>& groups_all = plan->groups_all;
  std::vector<double> c_grid = settings.c_grid;
  if (settings.large_set > 0 && instances.size() > settings.large_set) {
    std::erase_if(c_grid, [](double c) { return c > 1.0; });
    if (c_grid.empty()) c_grid = {1.0};
  }
  // Out-of-fold margins of every instance, per C of the grid and per pooling.
  const bool windows = settings.window_instances;
  std::vector<std::array<std::vector<double>, 2>> margins_by_c(c_grid.size());
  for (auto& m : margins_by_c) m.fill(std::vector<double>(instances.size(), 0.0));
  const auto fold_error =
      cross_validate(instances, *columns, fold_all, k, c_grid, settings, margins_by_c, cv.solver_by_c);
  if (fold_error) return *fold_error;

  double best_auc = -1.0;
  std::vector<double> margins_all;  // out of fold, every instance, at the chosen C and pooling
  for (size_t ci = 0; ci < c_grid.size(); ++ci) {
    const double c = c_grid[ci];
    const auto& margins = margins_by_c[ci];
    // C and the pooling are chosen on the images as they are; the copies only add training
    // instances. Image-level learning has one margin (both entries equal): "mean" is kept.
    double auc_c = -1.0;
    for (int p = 0; p < (windows ? 2 : 1); ++p) {
      const std::vector<double> image_margins(margins[p].begin(),
                                              margins[p].begin() + static_cast<std::ptrdiff_t>(n));
      const double auc = roc_auc(image_margins, labels);
      auc_c = std::max(auc_c, auc);
      if (auc > best_auc + 1e-9) {  // ties keep the smaller C (stronger regularisation) and the mean
        best_auc = auc;
        cv.chosen_c = c;
        cv.margins = image_margins;
        margins_all = margins[p];
        out.model.pooling = windows ? kPoolings[p] : "";
      }
    }
    cv.auc_by_c.emplace_back(c, auc_c);
  }

  // Calibration and thresholds see the copies too: the promise then covers camera photos after the
  // processing the copies simulate (the group bound keeps copies of one image from counting as
  // independent evidence).
  Model& model = out.model;
  model.calibration = fit_platt(margins_all, labels_all);
  std::vector<double> probabilities_all;
  probabilities_all.reserve(margins_all.size());
  for (double m : margins_all) probabilities_all.push_back(model.calibration.probability(m));
  cv.probabilities.assign(probabilities_all.begin(),
                          probabilities_all.begin() + static_cast<std::ptrdiff_t>(n));
  model.training_prior = static_cast<double>(positives) / static_cast<double>(items.size());

  // Thresholds and camera tail through the same calibration as held-out camera photos
  // (conformal.hpp), here on the out-of-fold scores with no guard applied; `calibrate` and
  // `train --calibration` replace them.
  const std::vector<CalibrationImage> oof =
      out_of_fold_calibration(instances, probabilities_all, margins_all, labels_all, groups_all, n);
  apply_calibration(
      model,
      calibrate_thresholds(oof, {settings.target_fpr, settings.fpr_confidence, settings.generated_miss},
                           "out-of-fold"),
      settings.target_fpr, settings.generated_miss);

  std::vector<std::string> generators;
  generators.reserve(items.size());
  for (const auto& it : items) generators.push_back(it.file.generator);
  cv.report = evaluate_scores(cv.probabilities, labels, generators, model.thresholds.likely_generated);

  // Final model on everything.
  Standardised everything = standardise(instances, *columns, all, settings);
  SolverReport final_report;
  auto fitted = solve_linear_svm(everything.z, everything.y, balanced_settings(everything.y, cv.chosen_c),
                                 &final_report);
  cv.final_solver.add(final_report);
  if (!fitted) return fitted.error();
  model.scaler = std::move(everything.scaler);
  model.linear = std::move(*fitted);
  model.instances = windows ? "windows" : "image";

  model.extractor_version = std::string(kExtractorVersion);
  model.schema_id = feature_schema_id();
  model.feature_index = *columns;
  for (size_t c : *columns) {
    model.features.push_back(feature_names()[c]);
    model.families.push_back(feature_families()[c]);
  }
  model.created = utc_now();
  if (model.calibration_set) model.calibration_set->created = model.created;

  nlohmann::ordered_json counts = {{"camera", items.size() - positives}, {"generated", positives}};
  nlohmann::ordered_json per_generator = nlohmann::ordered_json::object();
  for (const auto& g : audit.generators) per_generator[g.name] = g.count;
  counts["per_generator"] = per_generator;
  counts["augmented_copies"] = copies.size();
  nlohmann::ordered_json grid = nlohmann::ordered_json::array();
  for (size_t ci = 0; ci < cv.auc_by_c.size(); ++ci) {
    grid.push_back({{"c", cv.auc_by_c[ci].first},
                    {"oof_roc_auc", cv.auc_by_c[ci].second},
                    {"solver_passes", cv.solver_by_c[ci].passes},
                    {"solver_converged", cv.solver_by_c[ci].converged}});
  }
  const std::vector<std::string> files = training_file_keys(items);
  model.provenance = {
      {"counts", counts},
      {"settings", settings_to_json(settings)},
      {"audit_warnings", audit.warnings},
      {"cross_validation",
       {{"folds", k},
        {"groups", cv.groups},
        {"group_by", kGroupNames[static_cast<int>(settings.group_by)]},
        {"c_grid", grid},
        {"chosen_c", cv.chosen_c},
        {"final_fit",
         {{"solver_passes", cv.final_solver.passes}, {"solver_converged", cv.final_solver.converged}}},
        {"instances", model.instances},
        {"pooling", model.pooling},
        {"metrics", report_to_json(cv.report)}}},
      {"training_files", files}};
  model.reference = training_reference(model, items, labels, cv);
  model.applicability =
      fit_applicability(instances, labels_all, fold_all, k, model, settings.domain_coverage, settings.jobs);
  model.camera_pixels = pixels;
  const auto camera_oof = fit_camera_only(model, instances, labels_all, fold_all, groups_all, k, n, settings);
  model.provenance["camera_only"] = camera_only_provenance(model, camera_oof, cv, labels, generators);
  stamp_model_id(model);
  return out;
}

}  // namespace residue
