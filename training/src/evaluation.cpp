#include "residue/training/evaluation.hpp"

#include <cstdio>

namespace residue {

namespace {

MetricSet metric_set(const std::vector<double>& p, const std::vector<int>& y, double threshold) {
  MetricSet m;
  m.threshold = threshold;
  for (int label : y) (label != 0 ? m.generated : m.camera) += 1;
  m.confusion = confusion_at(p, y, threshold);
  m.brier = brier_score(p, y);
  m.ece = expected_calibration_error(p, y, 15);
  if (m.has_both_classes()) {
    m.roc_auc = roc_auc(p, y);
    m.average_precision = average_precision(p, y);
    m.tpr_at_fpr_1 = tpr_at_fpr(p, y, 0.01);
    m.tpr_at_fpr_5 = tpr_at_fpr(p, y, 0.05);
  }
  return m;
}

}  // namespace

EvaluationReport evaluate_scores(const std::vector<double>& p, const std::vector<int>& y,
                                 const std::vector<std::string>& generators, double threshold) {
  EvaluationReport r;
  r.overall = metric_set(p, y, threshold);
  r.roc = roc_curve(p, y);
  std::map<std::string, std::pair<std::vector<double>, std::vector<int>>> split;
  for (size_t i = 0; i < p.size(); ++i) {
    if (y[i] != 0) split[generators[i]];
  }
  for (auto& [name, data] : split) {
    for (size_t i = 0; i < p.size(); ++i) {
      if (y[i] == 0 || generators[i] == name) {
        data.first.push_back(p[i]);
        data.second.push_back(y[i]);
      }
    }
    r.per_generator[name] = metric_set(data.first, data.second, threshold);
  }
  for (int b = 0; b < 10; ++b) {
    ReliabilityBin bin{b / 10.0, (b + 1) / 10.0, 0, 0.0, 0.0};
    for (size_t i = 0; i < p.size(); ++i) {
      if (p[i] >= bin.low && (p[i] < bin.high || (b == 9 && p[i] <= 1.0))) {
        ++bin.count;
        bin.mean_predicted += p[i];
        bin.observed += y[i] != 0 ? 1.0 : 0.0;
      }
    }
    if (bin.count > 0) {
      bin.mean_predicted /= static_cast<double>(bin.count);
      bin.observed /= static_cast<double>(bin.count);
    }
    r.reliability.push_back(bin);
  }
  return r;
}

nlohmann::ordered_json metrics_to_json(const MetricSet& m) {
  nlohmann::ordered_json j = {{"camera", m.camera}, {"generated", m.generated}};
  if (m.has_both_classes()) {
    j["roc_auc"] = m.roc_auc;
    j["average_precision"] = m.average_precision;
    j["tpr_at_fpr_1pct"] = m.tpr_at_fpr_1;
    j["tpr_at_fpr_5pct"] = m.tpr_at_fpr_5;
  }
  j["ece"] = m.ece;
  j["brier"] = m.brier;
  j["threshold"] = m.threshold;
  j["confusion"] = {{"true_positive", m.confusion.true_positive},
                    {"false_positive", m.confusion.false_positive},
                    {"true_negative", m.confusion.true_negative},
                    {"false_negative", m.confusion.false_negative}};
  return j;
}

nlohmann::ordered_json report_to_json(const EvaluationReport& r) {
  nlohmann::ordered_json j;
  j["overall"] = metrics_to_json(r.overall);
  j["per_generator"] = nlohmann::ordered_json::object();
  for (const auto& [name, m] : r.per_generator) j["per_generator"][name] = metrics_to_json(m);
  return j;
}

std::string report_to_text(const EvaluationReport& r) {
  std::string out;
  char line[256];
  std::snprintf(line, sizeof line, "%-28s %6s %6s %7s %7s %8s %8s %6s %6s %5s %5s\n", "generator", "camera",
                "gen.", "ROC AUC", "AP", "TPR@1%", "TPR@5%", "ECE", "Brier", "FP", "FN");
  out += line;
  auto row = [&](const std::string& name, const MetricSet& m) {
    if (m.has_both_classes()) {
      std::snprintf(line, sizeof line, "%-28.28s %6zu %6zu %7.3f %7.3f %8.3f %8.3f %6.3f %6.3f %5ld %5ld\n",
                    name.c_str(), m.camera, m.generated, m.roc_auc, m.average_precision, m.tpr_at_fpr_1,
                    m.tpr_at_fpr_5, m.ece, m.brier, m.confusion.false_positive, m.confusion.false_negative);
    } else {
      std::snprintf(line, sizeof line, "%-28.28s %6zu %6zu %7s %7s %8s %8s %6.3f %6.3f %5ld %5ld\n",
                    name.c_str(), m.camera, m.generated, "-", "-", "-", "-", m.ece, m.brier,
                    m.confusion.false_positive, m.confusion.false_negative);
    }
    out += line;
  };
  for (const auto& [name, m] : r.per_generator) row(name, m);
  row("all generators", r.overall);
  return out;
}

}  // namespace residue
