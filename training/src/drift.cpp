#include "residue/training/drift.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>

namespace residue {

namespace {

// numpy.quantile's default ("linear") on sorted values.
double quantile_sorted(const std::vector<double>& sorted, double q) {
  const double pos = q * static_cast<double>(sorted.size() - 1);
  const auto lo = static_cast<size_t>(std::floor(pos));
  const size_t hi = std::min(lo + 1, sorted.size() - 1);
  return sorted[lo] + (pos - static_cast<double>(lo)) * (sorted[hi] - sorted[lo]);
}

std::string fixed(const char* format, double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, format, v);
  return buf;
}

// What commonly moves each family, for the plain-words findings (docs/features.md).
std::string likely_causes(const std::string& family) {
  if (family == "noise") {
    return "recompression, resizing, denoising or a new camera or phone pipeline are common causes";
  }
  if (family == "spectral")
    return "resizing, recompression or a new generator's upsampling are common causes";
  if (family == "resampling") return "resizing, rotation or perspective correction are common causes";
  return "a different mix of images (or of generators) reaches the queue";
}

nlohmann::ordered_json histogram_json(const ReferenceHistogram& h) {
  return {{"edges", h.edges}, {"camera", h.camera}, {"generated", h.generated}};
}

ReferenceHistogram histogram_from(const nlohmann::json& j) {
  return {j.at("edges").get<std::vector<double>>(), j.at("camera").get<std::vector<double>>(),
          j.at("generated").get<std::vector<double>>()};
}

DriftRow compare_row(const std::string& summary, const std::string& family, const ReferenceHistogram& ref,
                     const std::vector<double>& values, double prior, size_t reference_images) {
  DriftRow row{summary, family, 0.0, 0.0, "", ref.expected(prior), bin_shares(ref.edges, values)};
  row.psi = population_stability_index(row.expected, row.actual);
  row.noise_floor = psi_noise_floor(row.expected.size(), values.size(), reference_images);
  row.reading = row.psi > row.noise_floor ? psi_reading(row.psi) : "stable";
  if (values.empty()) {  // e.g. records from a residue that did not write family_distance yet
    row.psi = 0.0;
    row.reading = "no data";
  }
  return row;
}

}  // namespace

std::vector<double> decile_edges(std::vector<double> values) {
  std::vector<double> edges;
  if (values.empty()) return edges;
  std::sort(values.begin(), values.end());
  for (int k = 1; k < 10; ++k) {
    const double e = quantile_sorted(values, k / 10.0);
    if (edges.empty() || e > edges.back()) edges.push_back(e);
  }
  return edges;
}

std::vector<double> bin_shares(const std::vector<double>& edges, const std::vector<double>& values) {
  std::vector<double> shares(edges.size() + 1, 0.0);
  for (double v : values) {
    shares[static_cast<size_t>(std::upper_bound(edges.begin(), edges.end(), v) - edges.begin())] += 1.0;
  }
  if (!values.empty()) {
    for (double& s : shares) s /= static_cast<double>(values.size());
  }
  return shares;
}

double population_stability_index(const std::vector<double>& expected, const std::vector<double>& actual) {
  double psi = 0.0;
  for (size_t i = 0; i < std::min(expected.size(), actual.size()); ++i) {
    const double e = std::max(expected[i], kPsiFloor);
    const double a = std::max(actual[i], kPsiFloor);
    psi += (a - e) * std::log(a / e);
  }
  return psi;
}

std::string psi_reading(double psi) {
  if (psi > kPsiMajor) return "major";
  if (psi >= kPsiModerate) return "moderate";
  return "stable";
}

double chi_square_99(int dof) {
  // Upper 1 % points of chi-square, degrees of freedom 1..20, as printed in standard tables (e.g.
  // the NIST/SEMATECH e-Handbook's chi-square table; quoted from memory, checked against scipy).
  static const double table[] = {6.635,  9.210,  11.345, 13.277, 15.086, 16.812, 18.475,
                                 20.090, 21.666, 23.209, 24.725, 26.217, 27.688, 29.141,
                                 30.578, 32.000, 33.409, 34.805, 36.191, 37.566};
  return table[std::clamp(dof, 1, 20) - 1];
}

double psi_noise_floor(size_t bins, size_t batch, size_t reference) {
  if (batch == 0 || reference == 0 || bins < 2) return 0.0;
  const double n_eff = 1.0 / (1.0 / static_cast<double>(batch) + 1.0 / static_cast<double>(reference));
  return chi_square_99(static_cast<int>(bins) - 1) / n_eff;
}

std::vector<double> ReferenceHistogram::expected(double prior) const {
  std::vector<double> e(camera.size());
  for (size_t i = 0; i < e.size(); ++i) e[i] = (1.0 - prior) * camera[i] + prior * generated[i];
  return e;
}

ReferenceHistogram reference_histogram(const std::vector<double>& values, const std::vector<int>& labels) {
  ReferenceHistogram h;
  h.edges = decile_edges(values);
  std::vector<double> camera, generated;
  for (size_t i = 0; i < values.size(); ++i) (labels[i] == 1 ? generated : camera).push_back(values[i]);
  h.camera = bin_shares(h.edges, camera);
  h.generated = bin_shares(h.edges, generated);
  return h;
}

nlohmann::ordered_json reference_to_json(const TrainingReference& r) {
  nlohmann::ordered_json families = nlohmann::ordered_json::object();
  for (const auto& [family, h] : r.contribution) {
    families[family] = {{"contribution", histogram_json(h)},
                        {"distance", histogram_json(r.distance.at(family))}};
  }
  return {{"images", r.images},
          {"margin", histogram_json(r.margin)},
          {"families", families},
          {"bands", {{"camera", r.camera_bands}, {"generated", r.generated_bands}}}};
}

std::optional<TrainingReference> reference_from_json(const nlohmann::json& j) {
  try {
    TrainingReference r;
    r.images = j.at("images");
    r.margin = histogram_from(j.at("margin"));
    for (const auto& [family, h] : j.at("families").items()) {
      r.contribution[family] = histogram_from(h.at("contribution"));
      r.distance[family] = histogram_from(h.at("distance"));
    }
    r.camera_bands = j.at("bands").at("camera").get<std::map<std::string, double>>();
    r.generated_bands = j.at("bands").at("generated").get<std::map<std::string, double>>();
    return r;
  } catch (const nlohmann::json::exception&) {
    return std::nullopt;
  }
}

DriftReport assess_drift(const TrainingReference& ref, const std::vector<ScoredImage>& batch, double prior) {
  DriftReport r;
  r.images = batch.size();
  r.prior = prior;
  r.too_few = batch.size() < kMinimumImages;

  std::vector<double> margins;
  size_t inconclusive = 0;
  for (const auto& s : batch) {
    margins.push_back(s.margin);
    inconclusive += s.band == "inconclusive" ? 1 : 0;
    if (s.declared_generated) {
      ++r.declared_generated;
      r.declared_generated_missed += s.band != "likely-generated" ? 1 : 0;
    }
  }
  r.rows.push_back(compare_row("score", "", ref.margin, margins, prior, ref.images));
  for (const auto& [family, h] : ref.contribution) {
    std::vector<double> contribution, distance;
    for (const auto& s : batch) {
      const auto c = s.contribution.find(family);
      const auto d = s.distance.find(family);
      if (c != s.contribution.end()) contribution.push_back(c->second);
      if (d != s.distance.end()) distance.push_back(d->second);
    }
    r.rows.push_back(compare_row(family + " contribution", family, h, contribution, prior, ref.images));
    r.rows.push_back(
        compare_row(family + " distance", family, ref.distance.at(family), distance, prior, ref.images));
  }

  auto band_share = [](const std::map<std::string, double>& bands, const char* band) {
    const auto it = bands.find(band);
    return it == bands.end() ? 0.0 : it->second;
  };
  r.inconclusive_expected = (1.0 - prior) * band_share(ref.camera_bands, "inconclusive") +
                            prior * band_share(ref.generated_bands, "inconclusive");
  r.inconclusive_actual =
      batch.empty() ? 0.0 : static_cast<double>(inconclusive) / static_cast<double>(batch.size());
  r.declared_miss_expected = std::max(0.0, 1.0 - band_share(ref.generated_bands, "likely-generated"));

  r.verdict = "stable";
  auto raise = [&r](const char* level) {
    if (std::string(level) == "retrain" || r.verdict == "stable") r.verdict = level;
  };
  if (r.too_few) {
    for (auto& row : r.rows) row.reading = "not judged";
    r.findings.push_back("Only " + std::to_string(batch.size()) + " scored images: at least " +
                         std::to_string(kMinimumImages) +
                         " are needed before drift is judged (the figures above are shown, not judged).");
    return r;
  }
  // Most serious first: PSI rows by size.
  std::vector<const DriftRow*> order;
  for (const auto& row : r.rows) order.push_back(&row);
  std::stable_sort(order.begin(), order.end(),
                   [](const DriftRow* a, const DriftRow* b) { return a->psi > b->psi; });
  for (const DriftRow* row : order) {
    if (row->reading == "stable" || row->reading == "no data") continue;
    const bool major = row->reading == "major";
    std::string sentence = (major ? "Major change" : "Moderate change") + std::string(" in the ") +
                           row->summary + " (PSI " + fixed("%.2f", row->psi) + "): ";
    if (row->family.empty()) {
      sentence +=
          "images are scored differently from the training images; if the queue's share of generated "
          "images differs from " +
          fixed("%.3f", prior) + ", pass --prior, otherwise the images themselves have changed.";
    } else {
      sentence += "the " + row->family + " traces of these images differ from the training images; " +
                  likely_causes(row->family) + ".";
    }
    r.findings.push_back(sentence);
    raise(major ? "retrain" : "watch");
  }
  const auto n = static_cast<double>(batch.size());
  const double e = r.inconclusive_expected;
  if (r.inconclusive_actual - e > std::max(0.05, 2.0 * std::sqrt(e * (1.0 - e) / n))) {
    r.findings.push_back(fixed("%.1f", 100 * r.inconclusive_actual) +
                         " % of the images were inconclusive, against " + fixed("%.1f", 100 * e) +
                         " % expected from the training data.");
    raise("watch");
  }
  if (r.declared_generated >= 10) {
    const double m =
        static_cast<double>(r.declared_generated_missed) / static_cast<double>(r.declared_generated);
    const double em = r.declared_miss_expected;
    const double se = std::sqrt(em * (1.0 - em) / static_cast<double>(r.declared_generated));
    if (m - em > std::max(0.10, 2.0 * se)) {
      r.findings.push_back(
          std::to_string(r.declared_generated_missed) + " of " + std::to_string(r.declared_generated) +
          " images whose metadata declares them generated were not scored likely-generated (" +
          fixed("%.0f", 100 * m) + " %, against " + fixed("%.0f", 100 * em) +
          " % of training generated images): a generator the model has not seen may be in use.");
      raise("retrain");
    }
  }
  if (r.verdict == "retrain") {
    r.findings.insert(r.findings.begin(),
                      "Retraining looks due: collect recent images of the kinds named below, label them and "
                      "retrain (residue train --from), then gate the new model with residue compare.");
  } else if (r.verdict == "watch") {
    r.findings.insert(r.findings.begin(), "Worth watching: a moderate change, not yet a reason to retrain.");
  } else {
    r.findings.emplace_back("No material change from the training data.");
  }
  return r;
}

nlohmann::ordered_json drift_to_json(const DriftReport& r) {
  nlohmann::ordered_json rows = nlohmann::ordered_json::array();
  for (const auto& row : r.rows) {
    rows.push_back({{"summary", row.summary},
                    {"psi", row.psi},
                    {"noise_floor", row.noise_floor},
                    {"reading", row.reading},
                    {"expected_shares", row.expected},
                    {"actual_shares", row.actual}});
  }
  return {{"images", r.images},
          {"prior", r.prior},
          {"verdict", r.verdict},
          {"too_few_images", r.too_few},
          {"findings", r.findings},
          {"psi", rows},
          {"inconclusive",
           {{"expected_share", r.inconclusive_expected}, {"actual_share", r.inconclusive_actual}}},
          {"declared_generated",
           {{"images", r.declared_generated},
            {"not_likely_generated", r.declared_generated_missed},
            {"expected_miss_share", r.declared_miss_expected}}},
          {"psi_cutoffs",
           {{"moderate", kPsiModerate},
            {"major", kPsiMajor},
            {"source", "common practice in model monitoring"}}}};
}

std::string drift_to_text(const DriftReport& r) {
  std::string t = "Drift of " + std::to_string(r.images) +
                  " scored images against the training data (base rate " + fixed("%.3f", r.prior) +
                  " generated)\n\n";
  char line[160];
  std::snprintf(line, sizeof line, "  %-28s %7s %7s  %s\n", "summary", "PSI", "noise", "reading");
  t += line;
  for (const auto& row : r.rows) {
    std::snprintf(line, sizeof line, "  %-28s %7.3f %7.3f  %s\n", row.summary.c_str(), row.psi,
                  row.noise_floor, row.reading.c_str());
    t += line;
  }
  std::snprintf(line, sizeof line, "\n  inconclusive: %.1f %% (expected %.1f %%)\n",
                100 * r.inconclusive_actual, 100 * r.inconclusive_expected);
  t += line;
  std::snprintf(
      line, sizeof line,
      "  declared generated by metadata: %zu, of which not likely-generated: %zu (expected share %.0f %%)\n",
      r.declared_generated, r.declared_generated_missed, 100 * r.declared_miss_expected);
  t += line;
  t +=
      "\nPSI < 0.10 stable, 0.10-0.25 moderate, > 0.25 major: common practice in model monitoring, a rule of "
      "thumb. noise: the PSI that sampling alone exceeds 1 % of the time at these sample sizes; a row at or "
      "below "
      "it reads stable.\n\n";
  for (const auto& f : r.findings) t += "* " + f + "\n";
  return t;
}

}  // namespace residue
