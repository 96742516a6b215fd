// A model of camera photos alone: what notices an image that no generator folder explains.
//
//  1. The camera pixel model of the surprise family (features/surprise.hpp), fitted on the camera
//     training instances (photos and their augmented copies). It fills the family's NLL, expected
//     cost and gap in every vector the model scores (fill_surprise).
//  2. A camera-only density of the whole vector: the values standardised on camera instances, and
//     per family a probabilistic PCA (Tipping & Bishop 1999; applicability.hpp) fitted on camera
//     instances only. The camera-only score is the root mean square over families of the PPCA
//     distances, s = sqrt(mean_f d_f^2): about 1 for a typical camera photo, larger the more
//     unusual the image is for one. No generated image is used.
//  3. Its camera tail: the out-of-fold scores of the camera training photos (each fold's density
//     fitted without it), for the conformal p-value every record carries (conformal.hpp).
//
// Thread safety: pure functions and immutable data.
#pragma once

#include <algorithm>
#include <cmath>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "residue/features/extract.hpp"
#include "residue/features/surprise.hpp"
#include "residue/training/applicability.hpp"
#include "residue/training/conformal.hpp"
#include "residue/training/linear.hpp"

namespace residue {

// Fills the surprise family's derived values (NLL, expected cost, gap, slope) of the image's vector
// and of each window's from their statistics.
void fill_surprise(const CameraPixelModel& model, FeatureVector& features);
// The camera pixel model fitted on the statistics of `vectors` (whole feature vectors).
CameraPixelModel fit_camera_pixels(const std::vector<const std::vector<double>*>& vectors);

// The gap of each window at full scale (surprise.gap.full), in window order; empty without windows.
std::vector<double> window_gaps(const FeatureVector& filled);

struct CameraDensity {
  Scaler scaler;                          // over the model's features, fitted on camera instances
  std::vector<FamilyReference> families;  // PPCA per family (limit unused)
  // s over the model's features (raw values, as the vector gives them, in the model's order).
  [[nodiscard]] double score(const std::vector<double>& values,
                             std::map<std::string, double>* per_family = nullptr) const;
};

// A camera-only model's margin: the logarithm of the score (floored at 1e-12).
inline double camera_only_margin(double score) { return std::log(std::max(score, 1e-12)); }

struct CameraOnly {
  std::optional<CameraDensity> density;
  std::optional<CameraTail> tail;  // out-of-fold camera photos (originals)
  // At or below this conformal p-value a record is "unusual for a camera photo" (a reason, when the
  // two-class score does not already call it likely-generated).
  double unusual = 0.01;
};

// Fits the density on the camera rows (label 0) of `rows` (each the values over the model's
// features), and scores every row out of fold: row i by the density fitted on the camera rows of
// the other folds. The returned density is fitted on all camera rows.
struct CameraDensityFit {
  CameraDensity density;
  std::vector<double> out_of_fold;  // per row
};
CameraDensityFit fit_camera_density(const std::vector<std::vector<double>>& rows,
                                    const std::vector<int>& labels, const std::vector<int>& fold, int folds,
                                    const std::vector<std::string>& families, int jobs);

nlohmann::ordered_json camera_pixels_to_json(const CameraPixelModel& model);
CameraPixelModel camera_pixels_from_json(const nlohmann::json& json);
nlohmann::ordered_json camera_only_to_json(const CameraOnly& camera);
// `families`: the model's family of each feature (the density's columns are rebuilt from it).
CameraOnly camera_only_from_json(const nlohmann::json& json);

}  // namespace residue
