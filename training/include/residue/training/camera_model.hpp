// A model of camera photos alone: what notices an image that no generator folder explains.
//
//  1. The camera pixel model of the surprise family (features/surprise.hpp), fitted on the camera
//     training instances (photos and their augmented copies). It fills the family's NLL, expected
//     cost and gap in every vector the model scores (fill_surprise).
//  2. A camera-only density of the whole vector: the values standardised on camera instances, and
//     per family a probabilistic PCA (Tipping & Bishop 1999; applicability.hpp) fitted on camera
//     instances only. Its value is the root mean square over families of the PPCA distances,
//     d = sqrt(mean_f d_f^2): about 1 for a typical camera photo. No generated image is used.
//  3. The camera-only score, "how unusual for a camera photo": the sum of two robust z-values on
//     the camera photos (median, interquartile range / 1.349, out of fold),
//         score = (median(gap) - gap) / spread(gap) + (ln d - median(ln d)) / spread(ln d),
//     gap the image's coding-surprise gap at full scale. The gap counts one way only: generated
//     images cost *less* to code than a camera model expects (Cozzolino et al. 2024 report the same
//     direction; our measurements in docs/quality.md agree), while a density counts every direction.
//  4. Its camera tail: the out-of-fold scores of the camera training photos (each fold's density
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

// The gap at full scale (surprise.gap.full) of a filled vector, and of each of its windows in
// window order (empty without windows).
double image_gap(const std::vector<double>& filled);
std::vector<double> window_gaps(const FeatureVector& filled);

struct CameraDensity {
  Scaler scaler;                          // over the model's features, fitted on camera instances
  std::vector<FamilyReference> families;  // PPCA per family (limit unused)
  // s over the model's features (raw values, as the vector gives them, in the model's order).
  [[nodiscard]] double score(const std::vector<double>& values,
                             std::map<std::string, double>* per_family = nullptr) const;
};

struct CameraOnly {
  std::optional<CameraDensity> density;
  // Robust location and spread of the camera photos' gap and log density (out of fold).
  double gap_median = 0.0;
  double gap_spread = 1.0;
  double density_median = 0.0;
  double density_spread = 1.0;
  // A camera-only model's margin: asinh((score - score_median) / score_spread), out-of-fold camera
  // photos' median and spread, so that p = 1 / (1 + exp(-margin)) keeps the order of even the most
  // unusual images (a logistic of the score itself rounds them all to 1).
  double score_median = 0.0;
  double score_spread = 1.0;
  [[nodiscard]] double margin(double score) const {
    return std::asinh((score - score_median) / score_spread);
  }
  [[nodiscard]] double combine(double gap, double density) const {
    return (gap_median - gap) / gap_spread +
           (std::log(std::max(density, 1e-12)) - density_median) / density_spread;
  }
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
