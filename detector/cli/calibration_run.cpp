#include "calibration_run.hpp"

#include <cstdio>
#include <iostream>
#include <set>

#include "residue/training/trainer.hpp"
#include "residue/training/verdicts.hpp"

namespace residue::cli {

bool calibrate_from_roots(Model& model, const CalibrationInputs& inputs, const char* command) {
  std::vector<PreparedItem> items, copies;
  std::set<std::string> trained_on;
  const nlohmann::json provenance =
      model.provenance.is_object() ? nlohmann::json(model.provenance) : nlohmann::json::object();
  for (const auto& h : provenance.value("training_files", nlohmann::json::array()))
    trained_on.insert(h.get<std::string>());
  size_t overlap = 0;
  size_t unreadable = 0;
  for (const auto& root : inputs.roots) {
    DatasetArgs args = inputs.data;
    args.root = root;
    auto prepared = prepare_from_args(args, command);
    if (!prepared) return false;
    unreadable += prepared->report.failed.size() + prepared->dataset.skipped.size();
    // An image the model trained on scores lower than a new camera photo would: it would pull the
    // threshold down and break the promise. Such images (and their copies) are left out.
    std::vector<size_t> new_index(prepared->report.items.size(), SIZE_MAX);
    for (size_t i = 0; i < prepared->report.items.size(); ++i) {
      auto& it = prepared->report.items[i];
      if (trained_on.contains(training_file_key(it.sha256))) {
        ++overlap;
        continue;
      }
      new_index[i] = items.size();
      items.push_back(std::move(it));
    }
    for (auto& c : prepared->report.copies) {
      if (new_index[c.source] == SIZE_MAX) continue;
      c.source = new_index[c.source];
      copies.push_back(std::move(c));
    }
  }
  std::vector<std::string> roots = inputs.roots;
  if (!inputs.verdicts.empty()) {
    auto store = VerdictStore::open(inputs.verdicts);
    auto judged = store ? verdict_items(**store) : Result<VerdictItems>(store.error());
    if (!judged) {
      std::cerr << "residue " << command << ": --verdicts: " << judged.error().message << "\n";
      return false;
    }
    std::set<std::string> seen;
    for (const auto& it : items) seen.insert(it.sha256);
    size_t camera = 0;
    size_t generated = 0;
    for (auto& it : judged->items) {
      if (seen.contains(it.sha256)) continue;  // already among the calibration roots
      if (trained_on.contains(training_file_key(it.sha256))) {
        ++overlap;
        continue;
      }
      (it.file.label == Label::kCamera ? camera : generated) += 1;
      items.push_back(std::move(it));
    }
    std::printf(
        "Verdicts from %s: %zu verdicts; %zu camera and %zu generated judged images join the calibration.\n",
        inputs.verdicts.c_str(), judged->verdicts, camera, generated);
    for (const auto& note : judged->notes) std::printf("  %s\n", note.c_str());
    model.provenance["calibration_verdicts"] = {{"file", inputs.verdicts},
                                                {"verdicts", judged->verdicts},
                                                {"camera_images", camera},
                                                {"generated_images", generated},
                                                {"conflicts_left_out", judged->conflicts},
                                                {"without_vector", judged->without_vector}};
    roots.push_back("verdicts:" + inputs.verdicts);
  } else if (model.provenance.is_object()) {
    model.provenance.erase("calibration_verdicts");
  }
  if (overlap > 0) {
    std::cerr << "residue " << command << ": " << overlap
              << " calibration images are among the model's training images and were left out (their scores "
                 "are not those of new photos)\n";
  }
  const double old_threshold = model.thresholds.likely_generated;
  auto calibrated =
      calibrate_model(model, items, copies, inputs.group_by, inputs.settings, {roots, unreadable});
  if (!calibrated) {
    std::cerr << "residue " << command << ": " << calibrated.error().message << "\n";
    return false;
  }
  if (unreadable > 0) {
    std::printf(
        "%zu calibration files could not be read and were left out (listed above); the rest were used.\n",
        unreadable);
  }
  std::printf("Likely-generated threshold: p >= %.4f (was %.4f).\n", model.thresholds.likely_generated,
              old_threshold);
  return true;
}

std::string calibration_summary(const Model& model) {
  std::string out;
  char line[400];
  if (!model.calibration_set) {
    return "Calibration: not recorded (model trained before residue recorded it); no camera tail in its "
           "records.\n";
  }
  const CalibrationRecord& r = *model.calibration_set;
  const bool held_out = r.source == "held-out";
  std::snprintf(
      line, sizeof line, "Calibration (%s): %zu camera images in %zu groups%s, %zu generated images%s.\n",
      held_out ? "camera photos the model never trained on" : "the training's out-of-fold scores",
      r.camera_images, r.camera_groups,
      held_out ? (", " + std::to_string(r.camera_guarded) + " of them made inconclusive by a guard").c_str()
               : "",
      r.generated_images,
      r.copies > 0 ? (", " + std::to_string(r.copies) + " processed copies in the threshold").c_str() : "");
  out += line;
  if (!r.roots.empty()) {
    out += "  from:";
    for (const auto& root : r.roots) out += " " + root;
    out += " (digest " + r.digest.substr(0, 16) + ", " + r.created + ")\n";
  }
  std::snprintf(line, sizeof line, "  Bands: likely-generated at p >= %.4f, likely-camera below %.4f%s.\n",
                model.thresholds.likely_generated, model.thresholds.likely_camera,
                held_out && !r.likely_camera_calibrated
                    ? " (kept from training: no generated calibration images)"
                    : "");
  out += line;
  out += "  Promise of likely-generated: " + promise_text(model.thresholds) + ".\n";
  if (model.camera_tail) {
    out += "  Camera tail on every record: among " + std::to_string(model.camera_tail->margins.size()) + " " +
           model.camera_tail->source + " in " + std::to_string(model.camera_tail->group_count()) +
           " groups.\n";
  }
  return out;
}

}  // namespace residue::cli
