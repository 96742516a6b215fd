// Evaluation metrics for scores where higher means "generated" (label 1).
// Definitions follow scikit-learn's sklearn.metrics where one exists (the tests compare with it).
#pragma once

#include <vector>

namespace residue {

// Area under the ROC curve with ties counted half (Mann-Whitney U / (n0 n1)).
double roc_auc(const std::vector<double>& scores, const std::vector<int>& labels);

// Average precision: sum over thresholds of (R_k - R_{k-1}) P_k (sklearn.metrics.average_precision_score).
double average_precision(const std::vector<double>& scores, const std::vector<int>& labels);

// Mean squared difference between probability and label.
double brier_score(const std::vector<double>& probabilities, const std::vector<int>& labels);

// Expected calibration error of Guo, Pleiss, Sun & Weinberger (2017), "On calibration of modern
// neural networks", Eq. 3: predictions are binned by their confidence (the probability of the
// predicted class, max(p, 1 - p)) in `bins` equal-width bins over [0, 1];
// ECE = sum_b (|B_b| / n) |accuracy(B_b) - confidence(B_b)|.
double expected_calibration_error(const std::vector<double>& probabilities, const std::vector<int>& labels,
                                  int bins = 15);

struct RocPoint {
  double threshold;  // "generated" when score >= threshold
  double fpr;
  double tpr;
};
// ROC curve points from the highest threshold down, starting at (0, 0).
std::vector<RocPoint> roc_curve(const std::vector<double>& scores, const std::vector<int>& labels);

// Largest TPR among ROC points whose FPR does not exceed `fpr`.
double tpr_at_fpr(const std::vector<double>& scores, const std::vector<int>& labels, double fpr);

// Smallest threshold t such that the share of camera scores >= t is at most `fpr`.
double threshold_for_fpr(const std::vector<double>& camera_scores, double fpr);

struct Confusion {
  long true_positive = 0, false_positive = 0, true_negative = 0, false_negative = 0;
};
Confusion confusion_at(const std::vector<double>& scores, const std::vector<int>& labels, double threshold);

}  // namespace residue
