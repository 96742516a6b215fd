// Training: grouped k-fold cross-validation chooses C and gives out-of-fold margins; Platt's
// sigmoid is fitted on those margins; thresholds come from the out-of-fold probabilities; the
// final linear SVM is trained on every example with the chosen C.
#pragma once

#include <algorithm>
#include <string>
#include <vector>

#include "residue/training/audit.hpp"
#include "residue/training/augment.hpp"
#include "residue/training/evaluation.hpp"
#include "residue/training/groups.hpp"
#include "residue/training/model.hpp"

namespace residue {

struct TrainSettings {
  int folds = 5;
  std::vector<double> c_grid = {0.001, 0.01, 0.1, 1.0, 10.0};
  // Above this many instances, values of C over 1 are dropped from the grid: the dual solver's
  // time grows with C (coordinate descent needs more passes when few samples sit at the bound;
  // docs/performance.md). 0 keeps the grid as given (the CLI does so when --c-grid is set).
  size_t large_set = 3000;
  double target_fpr = 0.01;       // camera FPR the likely-generated threshold promises ...
  double fpr_confidence = 0.95;   // ... as an upper Clopper-Pearson bound at this confidence
  double domain_coverage = 0.99;  // share of training images (out of fold) inside the domain
  double generated_miss = 0.05;   // on generated images, for the likely-camera threshold
  GroupBy group_by = GroupBy::kDuplicates;
  std::vector<std::string> feature_prefixes;  // empty: every feature
  Augment augment = Augment::kFull;           // what prepare_dataset was asked for (recorded)
  // Window-level learning: every analysis window is a training instance (labelled and grouped as
  // its image); an image's margin pools its windows' margins, by the mean or the mean of the top
  // third, whichever ranks the out-of-fold images better. At most `windows_per_image` windows of
  // each instance train (evenly spaced; memory), all of them are scored.
  // Opt-in: on the development set it ranks unseen generators better but catches fewer images at
  // the 1 % operating point than image-level learning, for 5x the training cost (docs/quality.md).
  bool window_instances = false;
  size_t windows_per_image = 4;
  // Threads for the cross-validation folds (one fold each; at most `folds`). The model does not
  // depend on it; memory does: each fold in flight holds its standardised training rows as floats.
  int jobs = 1;
  // Camera photos alone (camera_model.hpp): no SVM; the camera-only score is the model.
  bool camera_only = false;
};

// How hard the SVM's solver worked: the most passes any of its solves took, and whether every one
// met the tolerance before the pass limit.
struct SolverUse {
  int passes = 0;
  bool converged = true;
  void add(const SolverReport& r) {
    passes = std::max(passes, r.passes);
    converged = converged && r.converged;
  }
};

struct CrossValidation {
  double chosen_c = 1.0;
  std::vector<std::pair<double, double>> auc_by_c;  // (C, out-of-fold ROC AUC, the better pooling)
  std::vector<SolverUse> solver_by_c;               // over the folds, per entry of auc_by_c
  SolverUse final_solver;                           // the fit on every instance
  std::vector<int> fold;                            // fold of each example
  size_t groups = 0;
  std::vector<double> margins;        // out-of-fold, at the chosen C
  std::vector<double> probabilities;  // Platt on those margins
  EvaluationReport report;            // out-of-fold metrics at the stored threshold
};

struct TrainOutcome {
  Model model;
  CrossValidation cv;
};

// The settings as recorded in a model's provenance ("settings"), and back. A model written before
// settings were recorded gives what its provenance still tells (folds, grouping, thresholds).
nlohmann::ordered_json settings_to_json(const TrainSettings& settings);
TrainSettings settings_from_model(const Model& model);

// The time now, UTC, ISO 8601 ("2026-12-04T22:37:07Z").
std::string utc_now();

// How a model's provenance lists a training file ("training_files"): the first 16 hex digits of
// its SHA-256 (64 bits; a chance collision among 10^7 files is about 3 in a million).
std::string training_file_key(const std::string& sha256);

// What a retrain changed against its parent: images added and removed (by content hash), per
// class and generator, and generators new to the model. Needs the parent's "training_files".
nlohmann::ordered_json lineage_of(const Model& parent, const std::vector<PreparedItem>& items);

// `copies`: augmented copies of `items` (PrepareReport::copies); they are training instances in
// their image's fold, and calibration and thresholds see them, but C is chosen and the reported
// out-of-fold metrics are computed on the images themselves.
Result<TrainOutcome> train_model(const std::vector<PreparedItem>& items, const TrainSettings& settings,
                                 const AuditReport& audit, const std::vector<PreparedItem>& copies = {});

}  // namespace residue
