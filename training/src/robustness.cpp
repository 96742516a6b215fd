#include "residue/training/robustness.hpp"

#include <cstdio>
#include <mutex>

#include "residue/features/transforms.hpp"
#include "residue/training/batch.hpp"
#include "residue/training/metrics.hpp"

namespace residue {

namespace {

struct Outcome {
  bool ok = false;
  double p = 0.0;
  std::string band;
  bool guarded = false;
};

Outcome score_processed(const std::string& path, const std::string& transform, const Model& model,
                        const ExtractOptions& options, std::optional<double> prior) {
  auto bytes = read_file(path, options.limits);
  if (!bytes) return {};
  auto processed = apply_transform(*bytes, transform, options.limits);
  if (!processed) return {};
  auto extraction = extract_bytes(*processed, options);
  if (!extraction) return {};
  const Score s = score(model, extraction->features, prior, &extraction->processing);
  return {true, s.p_generated, s.band, s.domain && !s.domain->reasons.empty()};
}

std::string percent(double v) {
  char buf[16];
  std::snprintf(buf, sizeof buf, "%5.1f %%", 100 * v);
  return buf;
}

}  // namespace

std::vector<ProcessingRow> evaluate_processing(const Dataset& dataset, const Model& model,
                                               const std::vector<std::string>& transforms,
                                               const ExtractOptions& options, int jobs,
                                               std::optional<double> prior, const ProgressFn& progress) {
  std::vector<ProcessingRow> rows;
  const size_t n = dataset.files.size();
  size_t done = 0;
  for (const auto& name : transforms) {
    ProcessingRow row;
    row.transform = name;
    for (const auto& t : processing_transforms()) {
      if (t.name == name) row.description = t.description;
    }
    std::vector<double> p;
    std::vector<int> y;
    ordered_parallel<Outcome>(
        n, jobs,
        [&](size_t i) { return score_processed(dataset.files[i].path, name, model, options, prior); },
        [&](size_t i, Outcome& o) {
          if (progress) progress(++done, n * transforms.size());
          if (!o.ok) {
            ++row.failed;
            return;
          }
          const bool generated = dataset.files[i].label == Label::kGenerated;
          p.push_back(o.p);
          y.push_back(generated ? 1 : 0);
          const double flagged = o.band == "likely-generated" ? 1.0 : 0.0;
          const double passed = o.band == "likely-camera" ? 1.0 : 0.0;
          const double inconclusive = o.band == "inconclusive" ? 1.0 : 0.0;
          const double guarded = o.guarded ? 1.0 : 0.0;
          if (generated) {
            ++row.generated;
            row.generated_caught += flagged;
            row.generated_inconclusive += inconclusive;
            row.generated_guarded += guarded;
            row.generated_passed += passed;
          } else {
            ++row.camera;
            row.camera_flagged += flagged;
            row.camera_inconclusive += inconclusive;
            row.camera_guarded += guarded;
            row.camera_passed += passed;
          }
        });
    const auto per = [](double& v, size_t count) { v = count > 0 ? v / static_cast<double>(count) : 0.0; };
    per(row.camera_flagged, row.camera);
    per(row.camera_inconclusive, row.camera);
    per(row.camera_guarded, row.camera);
    per(row.generated_caught, row.generated);
    per(row.generated_inconclusive, row.generated);
    per(row.generated_guarded, row.generated);
    per(row.camera_passed, row.camera);
    per(row.generated_passed, row.generated);
    row.roc_auc = row.camera > 0 && row.generated > 0 ? roc_auc(p, y) : 0.0;
    rows.push_back(row);
  }
  return rows;
}

nlohmann::ordered_json processing_rows_to_json(const std::vector<ProcessingRow>& rows) {
  nlohmann::ordered_json out = nlohmann::ordered_json::array();
  for (const auto& r : rows) {
    out.push_back({{"transform", r.transform},
                   {"description", r.description},
                   {"camera", r.camera},
                   {"generated", r.generated},
                   {"failed", r.failed},
                   {"camera_likely_generated", r.camera_flagged},
                   {"camera_inconclusive", r.camera_inconclusive},
                   {"camera_guarded", r.camera_guarded},
                   {"generated_likely_generated", r.generated_caught},
                   {"generated_inconclusive", r.generated_inconclusive},
                   {"generated_guarded", r.generated_guarded},
                   {"camera_likely_camera", r.camera_passed},
                   {"generated_likely_camera", r.generated_passed},
                   {"roc_auc", r.roc_auc}});
  }
  return out;
}

std::string processing_rows_to_text(const std::vector<ProcessingRow>& rows) {
  std::string out =
      "transform         camera  generated  camera→likely-gen  camera inconcl.  camera→likely-cam  "
      "generated caught  generated inconcl.  generated→likely-cam  AUC\n";
  for (const auto& r : rows) {
    char line[256];
    std::snprintf(line, sizeof line, "%-17s %6zu  %9zu  %17s  %15s  %17s  %16s  %18s  %20s  %5.3f%s\n",
                  r.transform.c_str(), r.camera, r.generated, percent(r.camera_flagged).c_str(),
                  percent(r.camera_inconclusive).c_str(), percent(r.camera_passed).c_str(),
                  percent(r.generated_caught).c_str(), percent(r.generated_inconclusive).c_str(),
                  percent(r.generated_passed).c_str(), r.roc_auc,
                  r.failed > 0 ? ("  (" + std::to_string(r.failed) + " failed)").c_str() : "");
    out += line;
  }
  return out;
}

}  // namespace residue
