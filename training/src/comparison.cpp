#include "residue/training/comparison.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <map>
#include <random>

#include "residue/training/metrics.hpp"

namespace residue {

namespace {

// Indices of the comparison images, split into the strata the bootstrap resamples.
struct Strata {
  std::vector<size_t> camera;
  std::vector<std::string> names;               // generators, sorted
  std::vector<std::vector<size_t>> generators;  // indices per generator
};

// One stratum's images in bootstrap units: the images of one group each, in order of first
// appearance (without groups every image is its own unit).
using Units = std::vector<std::vector<size_t>>;

Units units_of(const std::vector<size_t>& idx, const std::vector<int>& groups) {
  Units out;
  std::map<int, size_t> slot;
  for (size_t i : idx) {
    if (groups.empty()) {
      out.push_back({i});
      continue;
    }
    const auto [it, fresh] = slot.try_emplace(groups[i], out.size());
    if (fresh) out.emplace_back();
    out[it->second].push_back(i);
  }
  return out;
}

// One model's metric values per row for one draw of the images; rows in output order.
std::vector<std::vector<double>> row_values(const std::vector<double>& p, double threshold, const Strata& s) {
  auto gather = [&p](const std::vector<size_t>& idx) {
    std::vector<double> v;
    v.reserve(idx.size());
    for (size_t i : idx) v.push_back(p[i]);
    return v;
  };
  auto share_at_or_above = [threshold](const std::vector<double>& v) {
    if (v.empty()) return 0.0;
    return static_cast<double>(std::count_if(v.begin(), v.end(), [&](double x) { return x >= threshold; })) /
           static_cast<double>(v.size());
  };
  const std::vector<double> camera = gather(s.camera);
  const std::vector<int> zeros(camera.size(), 0);
  std::vector<std::vector<double>> out;
  out.push_back({share_at_or_above(camera), expected_calibration_error(camera, zeros)});

  std::vector<double> all = camera;
  std::vector<int> all_labels = zeros;
  std::vector<double> all_generated;
  for (const auto& idx : s.generators) {
    const std::vector<double> g = gather(idx);
    std::vector<double> scores = camera;
    scores.insert(scores.end(), g.begin(), g.end());
    std::vector<int> labels = zeros;
    labels.resize(scores.size(), 1);
    out.push_back({roc_auc(scores, labels), share_at_or_above(g),
                   expected_calibration_error(g, std::vector<int>(g.size(), 1))});
    all.insert(all.end(), g.begin(), g.end());
    all_generated.insert(all_generated.end(), g.begin(), g.end());
  }
  all_labels.resize(all.size(), 1);
  out.push_back({roc_auc(all, all_labels), share_at_or_above(all_generated), share_at_or_above(camera),
                 expected_calibration_error(all, all_labels)});
  return out;
}

// Metric names and orientation per row kind.
struct MetricSpec {
  const char* name;
  bool higher_is_better;
};
const std::vector<MetricSpec> kCameraMetrics = {{"fpr", false}, {"ece", false}};
const std::vector<MetricSpec> kGeneratorMetrics = {{"roc_auc", true}, {"tpr", true}, {"ece", false}};
const std::vector<MetricSpec> kAllMetrics = {
    {"roc_auc", true}, {"tpr", true}, {"fpr", false}, {"ece", false}};

std::string fixed(const char* format, double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, format, v);
  return buf;
}

}  // namespace

double percentile_sorted(const std::vector<double>& sorted, double q) {
  if (sorted.empty()) return 0.0;
  const double pos = q / 100.0 * static_cast<double>(sorted.size() - 1);
  const auto lo = static_cast<size_t>(std::floor(pos));
  const size_t hi = std::min(lo + 1, sorted.size() - 1);
  return sorted[lo] + (pos - static_cast<double>(lo)) * (sorted[hi] - sorted[lo]);
}

Comparison compare_models(const std::vector<int>& labels, const std::vector<std::string>& generators,
                          const ModelScores& old_model, const ModelScores& new_model,
                          const CompareSettings& settings, const std::vector<int>& groups) {
  Strata s;
  std::map<std::string, std::vector<size_t>> by_generator;
  for (size_t i = 0; i < labels.size(); ++i) {
    if (labels[i] == 1) {
      by_generator[generators[i]].push_back(i);
    } else {
      s.camera.push_back(i);
    }
  }
  for (auto& [name, idx] : by_generator) {
    s.names.push_back(name);
    s.generators.push_back(std::move(idx));
  }

  Comparison c{old_model.id, new_model.id, settings, {}, true, 0};
  const Units camera_units = units_of(s.camera, groups);
  std::vector<Units> generator_units;
  c.units = camera_units.size();
  for (const auto& idx : s.generators) {
    generator_units.push_back(units_of(idx, groups));
    c.units += generator_units.back().size();
  }
  const auto old_values = row_values(old_model.p, old_model.threshold, s);
  const auto new_values = row_values(new_model.p, new_model.threshold, s);
  std::vector<const std::vector<MetricSpec>*> specs = {&kCameraMetrics};
  c.rows.push_back({"camera", s.camera.size(), {}, "", camera_units.size()});
  size_t generated = 0;
  for (size_t g = 0; g < s.names.size(); ++g) {
    specs.push_back(&kGeneratorMetrics);
    c.rows.push_back({s.names[g], s.generators[g].size(), {}, "", generator_units[g].size()});
    generated += s.generators[g].size();
  }
  specs.push_back(&kAllMetrics);
  c.rows.push_back({"all", s.camera.size() + generated, {}, "", c.units});

  // Bootstrap distribution of each change NEW - OLD: [row][metric][replicate].
  std::vector<std::vector<std::vector<double>>> draws(c.rows.size());
  for (size_t r = 0; r < c.rows.size(); ++r) draws[r].resize(specs[r]->size());
  std::mt19937_64 rng(settings.seed);
  // As many units as the stratum has, drawn with replacement; a drawn unit brings all its images.
  auto resample = [&rng](const Units& units) {
    std::vector<size_t> out;
    if (units.empty()) return out;
    std::uniform_int_distribution<size_t> pick(0, units.size() - 1);
    for (size_t k = 0; k < units.size(); ++k) {
      const auto& unit = units[pick(rng)];
      out.insert(out.end(), unit.begin(), unit.end());
    }
    return out;
  };
  for (int b = 0; b < settings.resamples; ++b) {
    Strata d;
    d.camera = resample(camera_units);
    d.names = s.names;
    for (const auto& units : generator_units) d.generators.push_back(resample(units));
    const auto o = row_values(old_model.p, old_model.threshold, d);
    const auto n = row_values(new_model.p, new_model.threshold, d);
    for (size_t r = 0; r < c.rows.size(); ++r) {
      for (size_t m = 0; m < specs[r]->size(); ++m) {
        draws[r][m].push_back(n[r][m] - o[r][m]);
      }
    }
  }

  const double tail = 100.0 * (1.0 - settings.confidence) / 2.0;
  for (size_t r = 0; r < c.rows.size(); ++r) {
    ComparisonRow& row = c.rows[r];
    const bool judged = row.units >= settings.min_units;
    row.verdict = judged ? "same" : "too few";
    bool any_better = false;
    for (size_t m = 0; m < specs[r]->size(); ++m) {
      const MetricSpec& spec = (*specs[r])[m];
      MetricComparison mc{spec.name,
                          spec.higher_is_better,
                          old_values[r][m],
                          new_values[r][m],
                          new_values[r][m] - old_values[r][m],
                          0.0,
                          0.0,
                          judged ? "same" : "too few"};
      auto& dist = draws[r][m];
      std::sort(dist.begin(), dist.end());
      mc.low = percentile_sorted(dist, tail);
      mc.high = percentile_sorted(dist, 100.0 - tail);
      const bool up = judged && mc.low > 0.0 && mc.change > settings.tolerance;
      const bool down = judged && mc.high < 0.0 && mc.change < -settings.tolerance;
      if (up) mc.verdict = spec.higher_is_better ? "better" : "worse";
      if (down) mc.verdict = spec.higher_is_better ? "worse" : "better";
      if (mc.verdict == "worse") row.verdict = "worse";
      any_better = any_better || mc.verdict == "better";
      row.metrics.push_back(mc);
    }
    if (row.verdict != "worse" && any_better) row.verdict = "better";
    if (row.verdict == "worse") c.new_no_worse = false;
  }
  return c;
}

nlohmann::ordered_json comparison_to_json(const Comparison& c) {
  nlohmann::ordered_json rows = nlohmann::ordered_json::array();
  for (const auto& row : c.rows) {
    nlohmann::ordered_json metrics = nlohmann::ordered_json::object();
    for (const auto& m : row.metrics) {
      metrics[m.metric] = {{"old", m.old_value},
                           {"new", m.new_value},
                           {"change", m.change},
                           {"interval", {m.low, m.high}},
                           {"higher_is_better", m.higher_is_better},
                           {"verdict", m.verdict}};
    }
    rows.push_back({{"row", row.name},
                    {"images", row.images},
                    {"units", row.units},
                    {"verdict", row.verdict},
                    {"metrics", metrics}});
  }
  return {{"old_model", c.old_id},
          {"new_model", c.new_id},
          {"new_no_worse", c.new_no_worse},
          {"noise_margin",
           {{"method", "paired stratified cluster percentile bootstrap"},
            {"resamples", c.settings.resamples},
            {"units", c.units},
            {"min_units", c.settings.min_units},
            {"confidence", c.settings.confidence},
            {"tolerance", c.settings.tolerance},
            {"seed", c.settings.seed}}},
          {"rows", rows}};
}

std::string comparison_to_text(const Comparison& c) {
  std::string t = "OLD " + c.old_id + "  vs  NEW " + c.new_id + "\n\n";
  char line[200];
  std::snprintf(line, sizeof line, "  %-18s %6s %6s  %-8s %8s %8s %9s  %-19s %s\n", "row", "images", "groups",
                "metric", "OLD", "NEW", "change", "interval", "verdict");
  t += line;
  for (const auto& row : c.rows) {
    bool first = true;
    for (const auto& m : row.metrics) {
      const double change = m.change;
      const std::string interval = "[" + fixed("%+.3f", m.low) + ", " + fixed("%+.3f", m.high) + "]";
      std::snprintf(line, sizeof line, "  %-18s %6s %6s  %-8s %8.3f %8.3f %+9.3f  %-19s %s\n",
                    first ? row.name.substr(0, 18).c_str() : "",
                    first ? std::to_string(row.images).c_str() : "",
                    first ? std::to_string(row.units).c_str() : "", m.metric.c_str(), m.old_value,
                    m.new_value, change, interval.c_str(), m.verdict.c_str());
      t += line;
      first = false;
    }
    t += "  " + std::string(18, ' ') + "               row: " + row.verdict + "\n";
  }
  t += "\nchange = NEW - OLD; interval: its " + fixed("%.0f", 100 * c.settings.confidence) +
       " % paired bootstrap interval (" + std::to_string(c.settings.resamples) + " resamples of " +
       std::to_string(c.units) +
       " units, each group of images drawn whole); better/worse only when the interval excludes zero; "
       "'too few': fewer than " +
       std::to_string(c.settings.min_units) +
       " units, not judged. "
       "roc_auc and tpr: higher is better; "
       "fpr and "
       "ece: lower is better. tpr and fpr at each model's own likely-generated threshold.\n";
  t += c.new_no_worse ? "\nVerdict: NEW is no worse than OLD on every row.\n"
                      : "\nVerdict: NEW is WORSE than OLD on at least one row: do not promote it as it is.\n";
  return t;
}

}  // namespace residue
