#include "residue/training/trainer.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <exception>
#include <optional>

#include "residue/training/batch.hpp"
#include "trainer_parts.hpp"

namespace residue {

namespace detail {

int label_of(const PreparedItem& item) { return item.file.label == Label::kGenerated ? 1 : 0; }

}  // namespace detail

using detail::camera_only_provenance;
using detail::fit_camera_only;
using detail::Instances;
using detail::kGroupNames;
using detail::label_of;
using detail::out_of_fold_calibration;
using detail::plan_folds;
using detail::train_camera_only;
using detail::training_file_keys;

namespace {

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

}  // namespace

namespace detail {

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

}  // namespace detail

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
