// Comparing two models on the same labelled images, for gating a retrained model's promotion.
//
// Rows: camera images (false-positive rate at each model's own likely-generated threshold, ECE),
// each generator (ROC AUC of its images against all camera images, TPR at each model's own
// threshold, ECE) and everything together. ECE is Guo et al. (2017) with 15 bins on the row's own
// images.
//
// Noise margin: a paired, stratified percentile bootstrap (Efron & Tibshirani 1993, ch. 13). Each
// replicate draws camera images and each generator's images with replacement, separately, and
// scores the same draw with both models. With groups (duplicates, a shoot, a source) it draws whole
// groups within each stratum, a cluster bootstrap (Davison & Hinkley 1997, sec. 3.8): copies of one
// picture are not independent evidence, and drawing them one by one makes the interval too narrow.
// The change NEW - OLD gets a (1 - alpha) percentile interval. A metric is "worse" when the whole interval
// lies on the bad side of zero (below for AUC and TPR, above for FPR and ECE) and the change is larger than
// `tolerance` that way; "better" symmetrically; "same" otherwise; "too few" in rows with fewer than
// `min_units` units. A row is worse when any of its metrics is;
// NEW passes when no row is worse. Deterministic for a given seed.
#pragma once

#include <cstdint>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

namespace residue {

struct CompareSettings {
  int resamples = 1000;
  double confidence = 0.95;
  double tolerance = 0.0;  // improvements smaller than this never count as better or worse
  std::uint64_t seed = 1;
  // Rows drawn from fewer units are "too few" and never judged: with one group the bootstrap
  // interval collapses to a point and would call any change certain. 5 is our choice (with 5
  // units a draw repeats one unit only with probability 5 x 0.2^5 = 0.16 %), not a standard.
  size_t min_units = 5;
};

// Scores of one model on the comparison images.
struct ModelScores {
  std::string id;
  std::vector<double> p;   // calibrated P(generated)
  double threshold = 0.5;  // likely-generated at or above
};

struct MetricComparison {
  std::string metric;  // "roc_auc", "tpr", "fpr", "ece"
  bool higher_is_better = true;
  double old_value = 0.0, new_value = 0.0;
  double change = 0.0;           // NEW - OLD
  double low = 0.0, high = 0.0;  // bootstrap interval of the change
  std::string verdict;           // "better", "same", "worse", "too few"
};

struct ComparisonRow {
  std::string name;  // "camera", a generator, or "all"
  size_t images = 0;
  std::vector<MetricComparison> metrics;
  std::string verdict;  // "better", "same", "worse", or "too few" (fewer than min_units units)
  size_t units = 0;     // bootstrap units (groups) in the row
};

struct Comparison {
  std::string old_id, new_id;
  CompareSettings settings;
  std::vector<ComparisonRow> rows;
  bool new_no_worse = true;
  size_t units = 0;  // what the bootstrap draws: groups within strata (images without groups)
};

// Percentile of sorted values with linear interpolation (numpy.percentile's default).
double percentile_sorted(const std::vector<double>& sorted, double q);

// labels: 1 generated, 0 camera; generators: "camera" for camera images; groups: a group id per
// image, or empty (every image its own). Needs camera images and at least one generator.
Comparison compare_models(const std::vector<int>& labels, const std::vector<std::string>& generators,
                          const ModelScores& old_model, const ModelScores& new_model,
                          const CompareSettings& settings, const std::vector<int>& groups = {});

nlohmann::ordered_json comparison_to_json(const Comparison& c);
std::string comparison_to_text(const Comparison& c);

}  // namespace residue
