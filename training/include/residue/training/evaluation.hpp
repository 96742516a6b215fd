// Evaluation of calibrated scores: overall and per generator (each generator's images against all
// camera images), with the ROC curve and the reliability diagram's bins for plots.
#pragma once

#include <map>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "residue/training/metrics.hpp"

namespace residue {

struct MetricSet {
  size_t camera = 0;
  size_t generated = 0;
  double roc_auc = 0.0;
  double average_precision = 0.0;
  double tpr_at_fpr_1 = 0.0;  // TPR at FPR <= 1 %
  double tpr_at_fpr_5 = 0.0;  // TPR at FPR <= 5 %
  double ece = 0.0;           // Guo et al. 2017, 15 bins
  double brier = 0.0;
  Confusion confusion;  // at the decision threshold
  double threshold = 0.5;
  [[nodiscard]] bool has_both_classes() const { return camera > 0 && generated > 0; }
};

struct ReliabilityBin {
  double low, high;  // bin of predicted P(generated)
  size_t count;
  double mean_predicted;  // mean P(generated) in the bin
  double observed;        // share of generated images in the bin
};

struct EvaluationReport {
  MetricSet overall;
  std::map<std::string, MetricSet> per_generator;
  std::vector<RocPoint> roc;
  std::vector<ReliabilityBin> reliability;  // 10 equal-width bins of P(generated)
};

// `generators[i]` is "camera" for camera images.
EvaluationReport evaluate_scores(const std::vector<double>& p, const std::vector<int>& y,
                                 const std::vector<std::string>& generators, double threshold);

nlohmann::ordered_json metrics_to_json(const MetricSet& m);
nlohmann::ordered_json report_to_json(const EvaluationReport& r);
// A fixed-width table, one row per generator and one overall.
std::string report_to_text(const EvaluationReport& r);

}  // namespace residue
