// Training's settings as models record them, and the lineage of a retrain (trainer.hpp).
#include <algorithm>
#include <ctime>
#include <map>
#include <set>

#include "trainer_parts.hpp"

namespace residue {

namespace detail {

const char* const kGroupNames[3] = {"duplicates", "folder", "manifest"};

// Provenance's "training_files": each image's training_file_key, sorted.
std::vector<std::string> training_file_keys(const std::vector<PreparedItem>& items) {
  std::vector<std::string> files;
  files.reserve(items.size());
  for (const auto& it : items) files.push_back(training_file_key(it.sha256));
  std::sort(files.begin(), files.end());
  return files;
}

}  // namespace detail

using detail::kGroupNames;

std::string utc_now() {
  const std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

std::string training_file_key(const std::string& sha256) { return sha256.substr(0, 16); }

nlohmann::ordered_json settings_to_json(const TrainSettings& s) {
  return {{"folds", s.folds},
          {"c_grid", s.c_grid},
          {"large_set", s.large_set},
          {"target_fpr", s.target_fpr},
          {"generated_miss", s.generated_miss},
          {"fpr_confidence", s.fpr_confidence},
          {"domain_coverage", s.domain_coverage},
          {"group_by", kGroupNames[static_cast<int>(s.group_by)]},
          {"augment", augment_name(s.augment)},
          {"instances", s.window_instances ? "windows" : "image"},
          {"windows_per_image", s.windows_per_image},
          {"only", s.feature_prefixes},
          {"camera_only", s.camera_only}};
}

TrainSettings settings_from_model(const Model& model) {
  TrainSettings s;
  s.target_fpr = model.thresholds.target_fpr;
  s.generated_miss = model.thresholds.generated_miss;
  const nlohmann::json p =
      model.provenance.is_object() ? nlohmann::json(model.provenance) : nlohmann::json::object();
  const auto cv = p.value("cross_validation", nlohmann::json::object());
  s.folds = cv.value("folds", s.folds);
  std::string group_by = cv.value("group_by", std::string("duplicates"));
  if (p.contains("settings")) {
    const auto& j = p["settings"];
    s.folds = j.value("folds", s.folds);
    s.c_grid = j.value("c_grid", s.c_grid);
    s.large_set = j.value("large_set", s.large_set);
    s.target_fpr = j.value("target_fpr", s.target_fpr);
    s.generated_miss = j.value("generated_miss", s.generated_miss);
    s.fpr_confidence = j.value("fpr_confidence", s.fpr_confidence);
    s.domain_coverage = j.value("domain_coverage", s.domain_coverage);
    group_by = j.value("group_by", group_by);
    s.feature_prefixes = j.value("only", s.feature_prefixes);
    s.camera_only = j.value("camera_only", s.camera_only);
    // Models from before augmentation existed were trained without it.
    s.augment = parse_augment(j.value("augment", std::string("none"))).value_or(Augment::kNone);
    s.window_instances = j.value("instances", std::string("image")) == "windows";
    s.windows_per_image = j.value("windows_per_image", s.windows_per_image);
  }
  for (int g = 0; g < 3; ++g) {
    if (group_by == kGroupNames[g]) s.group_by = static_cast<GroupBy>(g);
  }
  return s;
}

nlohmann::ordered_json lineage_of(const Model& parent, const std::vector<PreparedItem>& items) {
  nlohmann::ordered_json lineage = {{"parent", parent.id}, {"parent_created", parent.created}};
  const nlohmann::json provenance =
      parent.provenance.is_object() ? nlohmann::json(parent.provenance) : nlohmann::json::object();
  const auto old_list = provenance.value("training_files", nlohmann::json::array());
  if (old_list.empty()) {
    lineage["added"] = nullptr;
    lineage["note"] = "the parent model does not list its training files; what was added is unknown";
    return lineage;
  }
  std::set<std::string> old_files;
  for (const auto& h : old_list) old_files.insert(h.get<std::string>());
  const auto old_generators =
      provenance.value("counts", nlohmann::json::object()).value("per_generator", nlohmann::json::object());
  size_t camera = 0, generated = 0;
  std::set<std::string> kept;
  std::map<std::string, size_t> per_generator;
  std::set<std::string> new_generators;
  for (const auto& it : items) {
    const std::string h = training_file_key(it.sha256);
    if (old_files.contains(h)) {
      kept.insert(h);
      continue;
    }
    if (it.file.label == Label::kGenerated) {
      ++generated;
      per_generator[it.file.generator] += 1;
      if (!old_generators.contains(it.file.generator)) new_generators.insert(it.file.generator);
    } else {
      ++camera;
    }
  }
  lineage["added"] = {{"images", camera + generated},
                      {"camera", camera},
                      {"generated", generated},
                      {"per_generator", per_generator},
                      {"new_generators", new_generators}};
  lineage["removed"] = {{"images", old_files.size() - kept.size()}};
  return lineage;
}

}  // namespace residue
