#include "residue/training/camera_model.hpp"

#include <algorithm>
#include <cmath>
#include <exception>
#include <map>
#include <numeric>

#include "residue/training/batch.hpp"

namespace residue {

namespace {

// Where the surprise family's statistics start in the full vector.
size_t surprise_offset() {
  static const size_t at = [] {
    const auto& names = feature_names();
    const auto it = std::find(names.begin(), names.end(), surprise_names().front());
    return static_cast<size_t>(it - names.begin());
  }();
  return at;
}

void fill_row(const CameraPixelModel& model, std::vector<double>& row) {
  const size_t at = surprise_offset();
  if (row.size() < at + surprise_names().size()) return;
  const auto derived = surprise_values(model, row.data() + at);
  std::copy(derived.begin(), derived.end(), row.begin() + static_cast<std::ptrdiff_t>(at + kSurpriseStats));
}

constexpr size_t kGapFull = kSurpriseStats + 2 * kSurpriseLevels;  // surprise.gap.full within the family

}  // namespace

void fill_surprise(const CameraPixelModel& model, FeatureVector& features) {
  fill_row(model, features.values);
  for (auto& w : features.windows) fill_row(model, w);
}

CameraPixelModel fit_camera_pixels(const std::vector<const std::vector<double>*>& vectors) {
  std::vector<const double*> rows;
  rows.reserve(vectors.size());
  for (const auto* v : vectors) rows.push_back(v->data() + surprise_offset());
  return fit_camera_pixels(rows);
}

double image_gap(const std::vector<double>& filled) {
  const size_t at = surprise_offset() + kGapFull;
  return at < filled.size() ? filled[at] : 0.0;
}

std::vector<double> window_gaps(const FeatureVector& filled) {
  std::vector<double> out;
  out.reserve(filled.windows.size());
  for (const auto& w : filled.windows) {
    if (w.size() > surprise_offset() + kGapFull) out.push_back(w[surprise_offset() + kGapFull]);
  }
  return out;
}

double CameraDensity::score(const std::vector<double>& values,
                            std::map<std::string, double>* per_family) const {
  std::vector<double> z(values.size());
  scaler.apply_row(values.data(), z.data());
  double sum = 0.0;
  for (const auto& f : families) {
    const double d = f.distance(z.data());
    sum += d * d;
    if (per_family != nullptr) (*per_family)[f.family] = d;
  }
  return families.empty() ? 0.0 : std::sqrt(sum / static_cast<double>(families.size()));
}

CameraDensityFit fit_camera_density(const std::vector<std::vector<double>>& rows,
                                    const std::vector<int>& labels, const std::vector<int>& fold, int folds,
                                    const std::vector<std::string>& families, int jobs) {
  const size_t d = families.size();
  CameraDensityFit out;
  std::vector<const double*> camera;
  for (size_t i = 0; i < rows.size(); ++i) {
    if (labels[i] == 0) camera.push_back(rows[i].data());
  }
  std::vector<size_t> all_columns(d);
  std::iota(all_columns.begin(), all_columns.end(), size_t{0});
  out.density.scaler = Scaler::fit(camera, all_columns);
  Matrix z{rows.size(), d, std::vector<double>(rows.size() * d)};
  for (size_t i = 0; i < rows.size(); ++i) out.density.scaler.apply_row(rows[i].data(), z.row(i));
  // Per fold: its camera rows (what a fit may see) and all its rows (what the fit without it scores).
  std::vector<std::vector<size_t>> camera_rows(static_cast<size_t>(folds));
  std::vector<std::vector<size_t>> fold_rows(static_cast<size_t>(folds));
  for (size_t i = 0; i < rows.size(); ++i) {
    if (fold[i] < 0 || fold[i] >= folds) continue;
    fold_rows[static_cast<size_t>(fold[i])].push_back(i);
    if (labels[i] == 0) camera_rows[static_cast<size_t>(fold[i])].push_back(i);
  }
  auto fits = fit_families_out_of_fold(z, families, camera_rows, fold_rows, jobs);
  out.density.families = std::move(fits.references);
  out.out_of_fold.assign(rows.size(), 0.0);
  for (size_t i = 0; i < rows.size(); ++i) {
    double sum = 0.0;
    for (const auto& d : fits.out_of_fold) sum += d[i] * d[i];
    out.out_of_fold[i] =
        fits.out_of_fold.empty() ? 0.0 : std::sqrt(sum / static_cast<double>(fits.out_of_fold.size()));
  }
  return out;
}

nlohmann::ordered_json camera_pixels_to_json(const CameraPixelModel& model) {
  return {{"method", "two-sided-geometric-per-activity-class"},
          {"levels", {"full", "half", "quarter"}},
          {"classes", kSurpriseClasses},
          {"mean_abs", model.mean_abs},
          {"images", model.images}};
}

CameraPixelModel camera_pixels_from_json(const nlohmann::json& j) {
  CameraPixelModel m;
  m.images = j.at("images");
  const auto& levels = j.at("mean_abs");
  if (!levels.is_array() || levels.size() != kSurpriseLevels)
    throw nlohmann::json::other_error::create(501, "camera pixel model has the wrong number of levels",
                                              nullptr);
  for (size_t l = 0; l < kSurpriseLevels; ++l) {
    const auto classes = levels[l].get<std::vector<double>>();
    if (classes.size() != kSurpriseClasses)
      throw nlohmann::json::other_error::create(501, "camera pixel model has the wrong number of classes",
                                                nullptr);
    for (size_t c = 0; c < kSurpriseClasses; ++c) {
      // A residual reduced modulo 256 has |r| <= 128.
      if (!std::isfinite(classes[c]) || classes[c] < 0 || classes[c] > 128)
        throw nlohmann::json::other_error::create(501, "camera pixel model's mean |r| lies outside [0, 128]", nullptr);
      m.mean_abs[l][c] = classes[c];
      m.theta[l][c] = tsgd_theta(classes[c]);
    }
  }
  return m;
}

nlohmann::ordered_json camera_only_to_json(const CameraOnly& camera) {
  nlohmann::ordered_json j = {{"method", "coding-surprise-gap-and-ppca-per-family-camera-only"},
                              {"unusual_p_value", camera.unusual},
                              {"gap_median", camera.gap_median},
                              {"gap_spread", camera.gap_spread},
                              {"log_density_median", camera.density_median},
                              {"log_density_spread", camera.density_spread},
                              {"score_median", camera.score_median},
                              {"score_spread", camera.score_spread}};
  if (camera.density) {
    nlohmann::ordered_json families = nlohmann::ordered_json::array();
    for (const auto& f : camera.density->families) families.push_back(family_reference_to_json(f));
    j["scaler"] = {{"mean", camera.density->scaler.mean}, {"scale", camera.density->scaler.scale}};
    j["families"] = families;
  }
  if (camera.tail) j["camera_tail"] = camera_tail_to_json(*camera.tail);
  return j;
}

CameraOnly camera_only_from_json(const nlohmann::json& j) {
  CameraOnly c;
  c.unusual = j.at("unusual_p_value");
  c.gap_median = j.at("gap_median");
  c.gap_spread = j.at("gap_spread");
  c.density_median = j.at("log_density_median");
  c.density_spread = j.at("log_density_spread");
  c.score_median = j.at("score_median");
  c.score_spread = j.at("score_spread");
  if (!(c.gap_spread > 0) || !(c.density_spread > 0) || !(c.score_spread > 0) ||
      !std::isfinite(c.score_median) || !std::isfinite(c.gap_median) || !std::isfinite(c.density_median))
    throw nlohmann::json::other_error::create(501, "camera-only spreads must be positive", nullptr);
  if (j.contains("scaler")) {
    CameraDensity d;
    d.scaler.mean = j["scaler"].at("mean").get<std::vector<double>>();
    d.scaler.scale = j["scaler"].at("scale").get<std::vector<double>>();
    if (d.scaler.mean.size() != d.scaler.scale.size())
      throw nlohmann::json::other_error::create(501, "camera-only scaler is inconsistent", nullptr);
    for (double s : d.scaler.scale) {
      if (!(s > 0))
        throw nlohmann::json::other_error::create(501, "camera-only scaler has a bad scale", nullptr);
    }
    for (const auto& f : j.at("families")) {
      d.families.push_back(family_reference_from_json(f));
      for (size_t col : d.families.back().columns) {
        if (col >= d.scaler.mean.size())
          throw nlohmann::json::other_error::create(501, "camera-only reference names a missing feature",
                                                    nullptr);
      }
    }
    c.density = std::move(d);
  }
  if (j.contains("camera_tail")) c.tail = camera_tail_from_json(j["camera_tail"]);
  return c;
}

}  // namespace residue
