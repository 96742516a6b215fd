// Thresholds set on camera photos the model never trained on (split-conformal calibration: Vovk,
// Gammerman & Shafer 2005, "Algorithmic learning in a random world", ch. 2; Angelopoulos & Bates
// 2021, "A gentle introduction to conformal prediction", sec. 1), and the camera tail every record
// carries.
//
// Definitions (docs/training.md, "Calibration"):
//  - A calibration image is scored by the model exactly as a scan would score it. It is `guarded`
//    when a guard (outside the applicability reference, processing the training never showed)
//    makes it inconclusive whatever its score.
//  - The likely-generated band's camera false-positive rate is
//        FPR(t) = P(p >= t and not guarded | camera).
//    Its promise is the larger of two one-sided Clopper-Pearson upper bounds at `confidence`:
//    k_images of n_images calibration camera images, and k_groups of n_groups groups, where an
//    image counts when p >= t and it is not guarded, and a group counts when any of its images
//    (its augmented copies included) counts. Guarded images stay in the denominators.
//  - The threshold is the lowest whose promise is at most the target (applicability.hpp,
//    promised_threshold); when none is, it lies just above the highest unguarded camera score.
//  - The camera tail of a score s (margin m): k = the calibration camera photos (originals, never
//    copies) whose margin is at least m, n all of them; the conformal p-value (k + 1) / (n + 1)
//    (Vovk et al. 2005; valid for an exchangeable camera photo: P(p-value <= a) <= a), and the
//    Clopper-Pearson upper bound of k / n. It is computed on margins, so a deployment prior
//    (--prior), which moves p but not the order, does not change it.
//
// Thread safety: pure functions and immutable data.
#pragma once

#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "residue/training/applicability.hpp"

namespace residue {

// One calibration image as the model scored it.
struct CalibrationImage {
  double p = 0.0;  // P(generated) at the model's training base rate
  double margin = 0.0;
  int label = 0;          // 0 camera, 1 generated
  int group = 0;          // images that are not independent (near duplicates, declared groups, copies)
  bool guarded = false;   // a guard makes it inconclusive whatever its score
  bool copy = false;      // an augmented copy of a calibration image (in its original's group)
  std::string copy_kind;  // a copy's transform without its parameter ("jpeg", "downscale"); "" for originals
  std::string sha256;     // of the file (the original's for a copy); for the digest
  std::string path;
};

// A transform's kind: its name without the trailing parameter ("jpeg-q83" -> "jpeg",
// "crop-centre-0.72" -> "crop-centre"); names without a number are their own kind.
std::string transform_kind(const std::string& transform);

// Where a score stands among the calibration camera photos.
struct TailPosition {
  size_t at_least = 0;         // k: calibration camera photos whose margin is >= this one
  size_t images = 0;           // n
  size_t groups_at_least = 0;  // distinct groups among those k
  size_t groups = 0;           // all groups of the n photos
  double p_value = 1.0;        // (k + 1) / (n + 1)
  double upper_bound = 1.0;    // one-sided Clopper-Pearson upper bound of k / n at `confidence`
  double confidence = 0.95;
};

struct CameraTail {
  std::string source;  // "held-out camera photos" or "out-of-fold training camera photos"
  double confidence = 0.95;
  std::vector<double> margins;  // descending
  std::vector<int> groups;      // of each margin, renumbered 0.. in order of first appearance

  // From the camera originals among `images` (copies and generated images are left out).
  static CameraTail of(const std::vector<CalibrationImage>& images, std::string source, double confidence);
  [[nodiscard]] TailPosition position(double margin) const;
  [[nodiscard]] size_t group_count() const { return distinct_.empty() ? 0 : distinct_.back(); }
  // Recomputes what position() needs after margins and groups were set (the loader calls it).
  void index();

 private:
  std::vector<size_t> distinct_;  // distinct_[k]: distinct groups among the first k margins
};

// A share as people read it: "0.8 %" below 10 %, "25 %" above.
std::string percent_text(double share);

// "3 of 1,240 camera photos (3 of 900 groups) scored at least this high"
std::string tail_text(const TailPosition& t);
// The record's "camera_tail" object: k, n, groups, p_value, upper bound, source and text.
nlohmann::ordered_json tail_to_record(const CameraTail& tail, double margin);

nlohmann::ordered_json camera_tail_to_json(const CameraTail& tail);
// Throws nlohmann::json::exception (or std::invalid_argument) on a damaged document.
CameraTail camera_tail_from_json(const nlohmann::json& json);

// What a model's thresholds were set on.
struct CalibrationRecord {
  std::string source;   // "held-out" (calibrate, train --calibration) or "out-of-fold" (train)
  std::string created;  // UTC, ISO 8601
  size_t camera_images = 0;
  size_t camera_groups = 0;
  size_t camera_guarded = 0;  // camera images a guard makes inconclusive (never false positives)
  size_t generated_images = 0;
  size_t copies = 0;  // augmented copies counted in the threshold (never in the tail)
  std::vector<std::string> roots;
  size_t unreadable = 0;  // files of the roots that could not be read or decoded (left out)
  std::string digest;     // SHA-256 of the sorted "sha256 path" lines of the originals
  // The tightest camera FPR these images support (none flagged) and the threshold that gives it.
  double supported_fpr = 1.0;
  double supported_threshold = 1.0;
  bool likely_camera_calibrated = false;  // generated images set the likely-camera threshold
  // The kind of generated image that set it ("originals", "jpeg", "noise", ...), how many of that
  // kind there were, and the 95 % Clopper-Pearson bound on the share of them below it.
  std::string likely_camera_set_by;
  size_t likely_camera_images = 0;
  double likely_camera_bound = 1.0;
};

nlohmann::ordered_json calibration_record_to_json(const CalibrationRecord& record);
CalibrationRecord calibration_record_from_json(const nlohmann::json& json);

struct CalibrationSettings {
  double target_fpr = 0.01;
  double confidence = 0.95;
  double generated_miss = 0.05;
};

struct Calibrated {
  double likely_generated = 1.0;
  std::optional<double> likely_camera;  // absent without generated images
  FprPromise promise;
  CameraTail tail;
  CalibrationRecord record;
};

// Thresholds and tail from scored calibration images (see the definitions above). The
// likely-camera threshold, when generated images are given, is the lowest over the originals and
// each kind of copy of the p below which the share of that kind falling unguarded stays within
// `generated_miss` at `confidence` (one-sided Clopper-Pearson), capped at the likely-generated
// threshold.
Calibrated calibrate_thresholds(const std::vector<CalibrationImage>& images,
                                const CalibrationSettings& settings, const std::string& source);

}  // namespace residue
