#include "residue/training/metrics.hpp"

#include <algorithm>
#include <cmath>
#include <numeric>

namespace residue {

namespace {

std::vector<size_t> order_descending(const std::vector<double>& scores) {
  std::vector<size_t> idx(scores.size());
  std::iota(idx.begin(), idx.end(), 0);
  std::stable_sort(idx.begin(), idx.end(), [&](size_t a, size_t b) { return scores[a] > scores[b]; });
  return idx;
}

}  // namespace

std::vector<RocPoint> roc_curve(const std::vector<double>& scores, const std::vector<int>& labels) {
  double positives = 0;
  for (int y : labels) positives += y != 0;
  const double negatives = static_cast<double>(labels.size()) - positives;
  std::vector<RocPoint> points{{std::numeric_limits<double>::infinity(), 0.0, 0.0}};
  const auto idx = order_descending(scores);
  double tp = 0;
  double fp = 0;
  for (size_t k = 0; k < idx.size(); ++k) {
    (labels[idx[k]] != 0 ? tp : fp) += 1;
    if (k + 1 < idx.size() && scores[idx[k + 1]] == scores[idx[k]]) continue;  // ties: one point
    points.push_back(
        {scores[idx[k]], negatives > 0 ? fp / negatives : 0.0, positives > 0 ? tp / positives : 0.0});
  }
  return points;
}

double roc_auc(const std::vector<double>& scores, const std::vector<int>& labels) {
  const auto points = roc_curve(scores, labels);
  double area = 0.0;
  for (size_t k = 1; k < points.size(); ++k) {
    area += (points[k].fpr - points[k - 1].fpr) * (points[k].tpr + points[k - 1].tpr) / 2.0;  // trapezoid
  }
  return area;
}

double average_precision(const std::vector<double>& scores, const std::vector<int>& labels) {
  double positives = 0;
  for (int y : labels) positives += y != 0;
  if (positives == 0) return 0.0;
  const auto idx = order_descending(scores);
  double tp = 0;
  double fp = 0;
  double previous_recall = 0.0;
  double ap = 0.0;
  for (size_t k = 0; k < idx.size(); ++k) {
    (labels[idx[k]] != 0 ? tp : fp) += 1;
    if (k + 1 < idx.size() && scores[idx[k + 1]] == scores[idx[k]]) continue;
    const double recall = tp / positives;
    ap += (recall - previous_recall) * (tp / (tp + fp));
    previous_recall = recall;
  }
  return ap;
}

double brier_score(const std::vector<double>& p, const std::vector<int>& labels) {
  double s = 0.0;
  for (size_t i = 0; i < p.size(); ++i) s += std::pow(p[i] - (labels[i] != 0 ? 1.0 : 0.0), 2);
  return p.empty() ? 0.0 : s / static_cast<double>(p.size());
}

double expected_calibration_error(const std::vector<double>& p, const std::vector<int>& labels, int bins) {
  std::vector<double> count(bins, 0.0), correct(bins, 0.0), confidence(bins, 0.0);
  for (size_t i = 0; i < p.size(); ++i) {
    const bool predicted_generated = p[i] >= 0.5;
    const double conf = predicted_generated ? p[i] : 1.0 - p[i];
    // Bin b covers (b/M, (b+1)/M]; confidence 0 would go to bin 0.
    const int b = std::clamp(static_cast<int>(std::ceil(conf * bins)) - 1, 0, bins - 1);
    count[b] += 1;
    confidence[b] += conf;
    correct[b] += predicted_generated == (labels[i] != 0) ? 1.0 : 0.0;
  }
  double ece = 0.0;
  for (int b = 0; b < bins; ++b) {
    if (count[b] > 0) ece += std::fabs(correct[b] - confidence[b]) / static_cast<double>(p.size());
  }
  return ece;
}

double tpr_at_fpr(const std::vector<double>& scores, const std::vector<int>& labels, double fpr) {
  double best = 0.0;
  for (const auto& pt : roc_curve(scores, labels)) {
    if (pt.fpr <= fpr + 1e-12) best = std::max(best, pt.tpr);
  }
  return best;
}

double threshold_for_fpr(const std::vector<double>& camera_scores, double fpr) {
  std::vector<double> s = camera_scores;
  std::sort(s.begin(), s.end(), std::greater<>());
  // At most floor(fpr n) camera scores may reach the threshold: sit just above the next one.
  const auto allowed = static_cast<size_t>(std::floor(fpr * static_cast<double>(s.size()) + 1e-9));
  if (s.empty()) return 0.5;
  if (allowed >= s.size()) return s.back();
  return std::nextafter(s[allowed], std::numeric_limits<double>::infinity());
}

Confusion confusion_at(const std::vector<double>& scores, const std::vector<int>& labels, double threshold) {
  Confusion c;
  for (size_t i = 0; i < scores.size(); ++i) {
    const bool said_generated = scores[i] >= threshold;
    if (labels[i] != 0) {
      (said_generated ? c.true_positive : c.false_negative) += 1;
    } else {
      (said_generated ? c.false_positive : c.true_negative) += 1;
    }
  }
  return c;
}

}  // namespace residue
