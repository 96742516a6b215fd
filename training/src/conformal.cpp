#include "residue/training/conformal.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <map>
#include <numeric>
#include <set>
#include <stdexcept>

#include "residue/features/fingerprint.hpp"
#include "residue/training/applicability.hpp"

namespace residue {

std::string transform_kind(const std::string& transform) {
  const size_t dash = transform.rfind('-');
  if (dash == std::string::npos || dash + 1 >= transform.size()) return transform;
  const std::string rest = transform.substr(dash + 1);
  const bool number = std::all_of(rest.begin(), rest.end(),
                                  [](char c) { return (c >= '0' && c <= '9') || c == '.' || c == 'q'; });
  if (!number) return transform;
  // "jpeg-q83": the parameter is "q83"; "crop-centre-0.72": "0.72".
  return transform.substr(0, dash);
}

namespace {

// 1240 -> "1,240"
std::string thousands(size_t n) {
  const std::string digits = std::to_string(n);
  std::string out;
  for (size_t i = 0; i < digits.size(); ++i) {
    if (i > 0 && (digits.size() - i) % 3 == 0) out += ',';
    out += digits[i];
  }
  return out;
}

}  // namespace

std::string percent_text(double share) {
  char buf[32];
  std::snprintf(buf, sizeof buf, share < 0.1 ? "%.1f %%" : "%.0f %%", 100 * share);
  return buf;
}

CameraTail CameraTail::of(const std::vector<CalibrationImage>& images, std::string source,
                          double confidence) {
  std::vector<const CalibrationImage*> camera;
  for (const auto& im : images) {
    if (im.label == 0 && !im.copy) camera.push_back(&im);
  }
  // Descending margin; ties by group so that the stored order is deterministic.
  std::stable_sort(camera.begin(), camera.end(), [](const CalibrationImage* a, const CalibrationImage* b) {
    return a->margin != b->margin ? a->margin > b->margin : a->group < b->group;
  });
  CameraTail t;
  t.source = std::move(source);
  t.confidence = confidence;
  std::map<int, int> renumbered;
  for (const auto* im : camera) {
    t.margins.push_back(im->margin);
    const auto [it, added] = renumbered.emplace(im->group, static_cast<int>(renumbered.size()));
    t.groups.push_back(it->second);
  }
  t.index();
  return t;
}

void CameraTail::index() {
  if (groups.size() != margins.size())
    throw std::invalid_argument("camera tail: margins and groups differ in length");
  for (size_t i = 1; i < margins.size(); ++i) {
    if (!(margins[i] <= margins[i - 1]))
      throw std::invalid_argument("camera tail: margins are not descending");
  }
  distinct_.assign(margins.size() + 1, 0);
  std::set<int> seen;
  for (size_t i = 0; i < margins.size(); ++i) {
    seen.insert(groups[i]);
    distinct_[i + 1] = seen.size();
  }
}

TailPosition CameraTail::position(double margin) const {
  TailPosition pos;
  pos.confidence = confidence;
  pos.images = margins.size();
  pos.groups = group_count();
  // k = #{margins >= margin}: the first index whose margin is below `margin` (descending order).
  const auto first_below =
      std::partition_point(margins.begin(), margins.end(), [&](double m) { return m >= margin; });
  pos.at_least = static_cast<size_t>(first_below - margins.begin());
  pos.groups_at_least = distinct_.empty() ? 0 : distinct_[pos.at_least];
  pos.p_value = static_cast<double>(pos.at_least + 1) / static_cast<double>(pos.images + 1);
  pos.upper_bound = clopper_pearson_upper(pos.at_least, pos.images, confidence);
  return pos;
}

std::string tail_text(const TailPosition& t) {
  std::string text = thousands(t.at_least) + " of " + thousands(t.images) + " calibration camera photos (" +
                     thousands(t.groups_at_least) + " of " + thousands(t.groups) +
                     " groups) scored at least this high";
  if (t.images > 0) {
    text += "; at most " + percent_text(t.upper_bound) + " of camera photos like them would (" +
            percent_text(t.confidence) + " confidence)";
  }
  return text;
}

nlohmann::ordered_json tail_to_record(const CameraTail& tail, double margin) {
  const TailPosition t = tail.position(margin);
  return {{"camera_photos_at_least", t.at_least},
          {"camera_photos", t.images},
          {"groups_at_least", t.groups_at_least},
          {"groups", t.groups},
          {"p_value", t.p_value},
          {"upper_bound", t.upper_bound},
          {"confidence", t.confidence},
          {"source", tail.source},
          {"text", tail_text(t)}};
}

nlohmann::ordered_json camera_tail_to_json(const CameraTail& tail) {
  return {{"source", tail.source},
          {"confidence", tail.confidence},
          {"margins", tail.margins},
          {"groups", tail.groups}};
}

CameraTail camera_tail_from_json(const nlohmann::json& j) {
  CameraTail t;
  t.source = j.at("source").get<std::string>();
  t.confidence = j.at("confidence").get<double>();
  if (!(t.confidence > 0.0 && t.confidence < 1.0))
    throw std::invalid_argument("camera tail: confidence outside (0, 1)");
  t.margins = j.at("margins").get<std::vector<double>>();
  t.groups = j.at("groups").get<std::vector<int>>();
  t.index();
  return t;
}

nlohmann::ordered_json calibration_record_to_json(const CalibrationRecord& r) {
  return {{"source", r.source},
          {"created", r.created},
          {"camera_images", r.camera_images},
          {"camera_groups", r.camera_groups},
          {"camera_guarded", r.camera_guarded},
          {"generated_images", r.generated_images},
          {"copies", r.copies},
          {"roots", r.roots},
          {"unreadable", r.unreadable},
          {"digest", r.digest},
          {"supported_fpr", r.supported_fpr},
          {"supported_threshold", r.supported_threshold},
          {"likely_camera_calibrated", r.likely_camera_calibrated},
          {"likely_camera_set_by", r.likely_camera_set_by},
          {"likely_camera_images", r.likely_camera_images},
          {"likely_camera_bound", r.likely_camera_bound}};
}

CalibrationRecord calibration_record_from_json(const nlohmann::json& j) {
  CalibrationRecord r;
  r.source = j.at("source").get<std::string>();
  r.created = j.at("created").get<std::string>();
  r.camera_images = j.at("camera_images").get<size_t>();
  r.camera_groups = j.at("camera_groups").get<size_t>();
  r.camera_guarded = j.at("camera_guarded").get<size_t>();
  r.generated_images = j.at("generated_images").get<size_t>();
  r.copies = j.at("copies").get<size_t>();
  r.roots = j.at("roots").get<std::vector<std::string>>();
  r.unreadable = j.value("unreadable", size_t{0});
  r.digest = j.at("digest").get<std::string>();
  r.supported_fpr = j.at("supported_fpr").get<double>();
  r.supported_threshold = j.at("supported_threshold").get<double>();
  r.likely_camera_calibrated = j.at("likely_camera_calibrated").get<bool>();
  // Absent in records from before per-kind likely-camera thresholds.
  r.likely_camera_set_by = j.value("likely_camera_set_by", std::string());
  r.likely_camera_images = j.value("likely_camera_images", size_t{0});
  r.likely_camera_bound = j.value("likely_camera_bound", 1.0);
  return r;
}

Calibrated calibrate_thresholds(const std::vector<CalibrationImage>& images,
                                const CalibrationSettings& settings, const std::string& source) {
  std::vector<double> p;
  std::vector<int> labels, groups;
  std::vector<bool> guarded;
  Calibrated out;
  CalibrationRecord& r = out.record;
  r.source = source;
  std::set<int> camera_groups;
  std::vector<std::string> lines;
  size_t generated = 0;
  for (const auto& im : images) {
    p.push_back(im.p);
    labels.push_back(im.label);
    groups.push_back(im.group);
    guarded.push_back(im.guarded);
    if (im.copy) {
      ++r.copies;
      continue;
    }
    lines.push_back(im.sha256 + " " + im.path + "\n");
    if (im.label == 0) {
      ++r.camera_images;
      camera_groups.insert(im.group);
      r.camera_guarded += im.guarded ? 1 : 0;
    } else {
      ++r.generated_images;
    }
  }
  r.camera_groups = camera_groups.size();
  std::sort(lines.begin(), lines.end());
  const std::string joined = std::accumulate(lines.begin(), lines.end(), std::string());
  r.digest = sha256_hex(std::span(reinterpret_cast<const std::uint8_t*>(joined.data()), joined.size()));

  const auto [threshold, promise] =
      promised_threshold(p, labels, groups, settings.target_fpr, settings.confidence, guarded);
  out.likely_generated = threshold;
  out.promise = promise;
  for (const auto& im : images) out.promise.camera_copies += im.copy && im.label == 0 ? 1 : 0;
  // The tightest promise: nothing flagged, just above the highest unguarded camera score.
  const auto tightest = promised_threshold(p, labels, groups, 0.0, settings.confidence, guarded);
  r.supported_fpr = tightest.second.bound;
  r.supported_threshold = tightest.first;

  // Likely-camera: generated images (copies included: a laundered copy is what the band must
  // not take in) that a guard leaves to their score. The band's promise, "at most `generated_miss`
  // of generated images fall in it, with `confidence`", must hold for the images as published and
  // after each kind of processing the copies simulate, so it is set per kind and the lowest wins:
  // per kind, the most images m that may lie below the threshold is the largest whose one-sided
  // Clopper-Pearson bound on m / (all of that kind, guarded included) stays within generated_miss,
  // the same form as the likely-generated promise. With none allowed (fewer than about 60 images
  // of a kind at 5 %), the threshold is that kind's lowest unguarded score.
  std::map<std::string, std::pair<size_t, std::vector<double>>> by_kind;  // kind -> (all, unguarded p)
  for (const auto& im : images) {
    if (im.label != 1) continue;
    ++generated;
    auto& [all, unguarded] = by_kind[im.copy ? im.copy_kind : ""];
    ++all;
    if (!im.guarded) unguarded.push_back(im.p);
  }
  if (generated > 0) {
    double t = 1.0;
    for (auto& [kind, counts] : by_kind) {
      auto& [all, unguarded] = counts;
      std::sort(unguarded.begin(), unguarded.end());
      size_t m = 0;
      while (m < unguarded.size() &&
             clopper_pearson_upper(m + 1, all, settings.confidence) <= settings.generated_miss) {
        ++m;
      }
      const double kind_threshold = m < unguarded.size() ? unguarded[m] : 1.0;  // m images below it
      if (kind_threshold < t || r.likely_camera_set_by.empty()) {
        t = std::min(t, kind_threshold);
        r.likely_camera_set_by = kind.empty() ? "originals" : kind;
        r.likely_camera_images = all;
        r.likely_camera_bound = clopper_pearson_upper(m, all, settings.confidence);
      }
    }
    out.likely_camera = std::min(t, std::min(1.0, out.likely_generated));
    r.likely_camera_calibrated = true;
  }
  out.tail = CameraTail::of(
      images, source == "held-out" ? "held-out camera photos" : "out-of-fold training camera photos",
      settings.confidence);
  return out;
}

}  // namespace residue
