// May the model judge this image? Three pieces a model keeps beside its weights:
//
//  1. A reference of its training vectors per feature family: probabilistic PCA (Tipping &
//     Bishop 1999, "Probabilistic principal component analysis") of the standardised values z of
//     the family: mean mu, the k leading eigenvectors v_i with variances l_i (k: the fewest that
//     explain 95 % of the variance) and the mean sigma^2 of the discarded variances. The distance
//     of an image is the PPCA Mahalanobis distance per dimension,
//         d = sqrt((sum_i p_i^2 / l_i + (|c|^2 - sum_i p_i^2) / sigma^2) / D),
//     c = z - mu, p_i = v_i . c, D the family's number of values: about 1 for a typical training
//     image. Each family's limit is set on out-of-fold distances so that 99 % of the training
//     images pass every family at once.
//  2. A processing profile: how many of the training images (per class) showed each kind of
//     everyday processing (processing.hpp). Processing that fewer than `min_support` camera photos
//     showed is processing the model never learned to tell apart from generator traces.
//  3. Clopper-Pearson bounds (Clopper & Pearson 1934) behind the likely-generated threshold.
//
// Thread safety: pure functions and immutable data.
#pragma once

#include <array>
#include <map>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "residue/features/processing.hpp"
#include "residue/training/linear.hpp"

namespace residue {

// --- processing evidence in JSON (scan records, the feature cache) ---
nlohmann::ordered_json processing_to_json(const ProcessingEvidence& evidence);
// Throws nlohmann::json::exception on a damaged document or one of another kProcessingVersion.
ProcessingEvidence processing_from_json(const nlohmann::json& json);
// [{"kind": "damaged" | "note", "message": ...}, ...]
nlohmann::ordered_json decoder_warnings_to_json(const std::vector<DecoderWarning>& warnings);

// --- Clopper-Pearson ---
// One-sided upper confidence bound of a binomial proportion with k successes in n trials:
// the `confidence` quantile of Beta(k + 1, n - k) (1 when k = n; 1 when n = 0).
double clopper_pearson_upper(size_t k, size_t n, double confidence);
// The smallest n whose bound with k = 0 is at most `target`: ceil(ln(1 - confidence) / ln(1 - target)).
size_t trials_needed(double target, double confidence);

// What the likely-generated threshold promises about camera photos: the one-sided upper
// Clopper-Pearson bound of the camera false-positive rate at `confidence`, out of fold, the larger
// of the bound over images and the bound over groups (a group counts when any of its images is
// at or above the threshold), so near-duplicates cannot inflate the evidence.
struct FprPromise {
  double confidence = 0.95;
  size_t camera_images = 0;
  size_t camera_groups = 0;
  size_t false_positive_images = 0;  // out of fold, at the threshold
  size_t false_positive_groups = 0;
  double bound = 1.0;        // the promise: camera FPR at most this, with `confidence`
  bool met = false;          // bound <= target_fpr
  size_t groups_needed = 0;  // camera groups needed to promise target_fpr with none flagged
  size_t camera_copies = 0;  // of camera_images, processed copies (counted with their photo's group)
};

// The lowest likely-generated threshold whose promise holds (bound <= target), from out-of-fold
// probabilities `p`, labels (0 camera, 1 generated) and groups: camera scores are flagged from the
// top, one more at a time (ties together). When even none flagged cannot keep the promise, the
// threshold lies just above the highest camera score and `met` is false. With `guarded` (one per
// image), guarded camera images count in the denominators but are never flagged (conformal.hpp).
std::pair<double, FprPromise> promised_threshold(const std::vector<double>& p, const std::vector<int>& labels,
                                                 const std::vector<int>& groups, double target,
                                                 double confidence, const std::vector<bool>& guarded = {});

// --- the PPCA reference of one family ---
struct FamilyReference {
  std::string family;
  std::vector<size_t> columns;     // positions in the model's feature list
  std::vector<double> mean;        // D
  std::vector<double> basis;       // k x D, row-major, orthonormal rows
  std::vector<double> variances;   // k
  double residual_variance = 1.0;  // sigma^2
  double limit = 0.0;              // distance above which the image is outside the domain
  [[nodiscard]] double distance(const double* z_model) const;  // z over the model's features
  // The distances of rows `rows` of z (over the model's features) at once, as one matrix product;
  // equal to distance() row by row up to rounding.
  [[nodiscard]] std::vector<double> distances(const Matrix& z, const std::vector<size_t>& rows) const;
};

// Count, mean and centred scatter sum((x - mean)(x - mean)') of a family's values over some rows.
// Those of disjoint row sets combine exactly (Chan, Golub & LeVeque 1979, the pairwise update), so
// cross-validation computes each fold's once and adds them up instead of recomputing k - 1 folds
// for every fit.
struct FamilyMoments {
  size_t count = 0;
  std::vector<double> mean;     // D
  std::vector<double> scatter;  // D x D, row-major
  // Rows `rows` of z, values `columns`.
  static FamilyMoments of(const Matrix& z, const std::vector<size_t>& columns,
                          const std::vector<size_t>& rows);
  FamilyMoments& operator+=(const FamilyMoments& other);
};

// One family's reference in JSON, and back (throws nlohmann::json::exception on an inconsistent one).
nlohmann::ordered_json family_reference_to_json(const FamilyReference& reference);
FamilyReference family_reference_from_json(const nlohmann::json& json);

// Fits mean, basis and variances on rows of standardised values (all the model's features);
// `columns` picks the family's. The limit is left at 0.
FamilyReference fit_family_reference(const std::string& family, const std::vector<size_t>& columns,
                                     const Matrix& z, double explained = 0.95);
// The same from the moments of the rows.
FamilyReference fit_family_reference(const std::string& family, const std::vector<size_t>& columns,
                                     const FamilyMoments& moments, double explained = 0.95);

// Per family (columns of z, grouped by family name, in name order): the reference fitted on the
// rows `fit_rows` of every fold together, and the distances out of fold: row r of `score_rows[f]`
// measured by the reference fitted on the other folds' `fit_rows` (no distance, 0, when those hold
// fewer than 3 rows). The moments of each fold are computed once and added (FamilyMoments).
// Families run on `jobs` threads; an exception in one is thrown again in the caller's thread.
struct FamilyFits {
  std::vector<FamilyReference> references;
  std::vector<std::vector<double>> out_of_fold;  // per family, per row of z
};
FamilyFits fit_families_out_of_fold(const Matrix& z, const std::vector<std::string>& families,
                                    const std::vector<std::vector<size_t>>& fit_rows,
                                    const std::vector<std::vector<size_t>>& score_rows, int jobs);

// The common quantile level q at which per-family limits (the q-quantile of each family's
// out-of-fold distances, linear interpolation as numpy.quantile) let `coverage` of the images
// pass every family; returns the limits (one per family, in the order given).
std::vector<double> joint_limits(const std::vector<std::vector<double>>& distances, double coverage);

// --- processing profile ---
struct ProcessingCounts {
  size_t images = 0;
  size_t quantised = 0;
  size_t lossy_webp = 0;
  size_t screenshot_like = 0;
  size_t double_jpeg = 0;
  std::map<int, size_t> jpeg_quality;    // quality -> images
  std::map<int, size_t> resampling_bin;  // round(256 f) of detected traces -> images
  // Fine detail (processing.hpp) per compression fidelity (compression_fidelity()): histogram of
  // floor(100 log10(fine detail)) -> images. Camera originals and their augmented copies.
  std::map<int, std::map<int, size_t>> fine_detail;
};
ProcessingCounts& operator+=(ProcessingCounts& counts, const ProcessingEvidence& evidence);
// Adds only the fine detail (for augmented copies, whose other processing does not count as seen).
void add_fine_detail(ProcessingCounts& counts, const ProcessingEvidence& evidence);

// How much of the finest detail the file's compression keeps, from 0 (lossy WebP or JPEG below
// quality 75) through 1 (JPEG 75-89) and 2 (JPEG 90 and above) to 3 (lossless).
int compression_fidelity(const ProcessingEvidence& evidence);

// The weakest fine detail the camera photos showed at a compression as strong as fidelity
// `fidelity` or stronger: the lower edge of the histogram bin that holds the camera photo of rank
// floor(share n) + 1 from the bottom (share 0.01: below 99 % of them), so that at most
// floor(share n) camera photos lie below it. std::nullopt under `min_support` photos.
std::optional<double> fine_detail_floor(const ProcessingCounts& camera, int fidelity, double share,
                                        size_t min_support);

struct Applicability {
  std::vector<FamilyReference> families;
  double coverage = 0.99;  // share of training images inside every limit, out of fold
  ProcessingCounts camera;
  ProcessingCounts generated;
  size_t min_support = 5;  // camera photos that must have shown a kind of processing
  // Images whose fine detail lies below this share of the camera photos at the same compression
  // are too weakened to judge (check_domain).
  double fine_detail_share = 0.01;
};

struct DomainCheck {
  bool in_domain = true;
  std::map<std::string, double> distance;  // per family
  std::map<std::string, double> limit;
  std::vector<std::string> families_out;
  std::vector<std::string> reasons;  // plain sentences; empty when the model may judge the image
};

// `z`: the image's standardised values over the model's features.
DomainCheck check_domain(const Applicability& applicability, const std::vector<double>& z,
                         const ProcessingEvidence* processing);

nlohmann::ordered_json applicability_to_json(const Applicability& applicability);
// Throws nlohmann::json::exception on a damaged document.
Applicability applicability_from_json(const nlohmann::json& json);

}  // namespace residue
