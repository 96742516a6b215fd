#include "residue/training/model.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <set>
#include <sstream>

#include "residue/features/fingerprint.hpp"
#include "residue/training/atomic_file.hpp"

namespace residue {

std::string band_of(const Thresholds& t, double p) {
  if (p >= t.likely_generated) return "likely-generated";
  if (p < t.likely_camera) return "likely-camera";
  return "inconclusive";
}

std::string promise_text(const Thresholds& t) {
  if (!t.promise) {
    return "the camera false-positive rate was set to " + percent_text(t.target_fpr) +
           " out of fold, without a confidence bound (model trained before bounds were recorded)";
  }
  const FprPromise& p = *t.promise;
  const std::string photos = p.camera_copies == 0
                                 ? std::to_string(p.camera_images) + " camera images"
                                 : std::to_string(p.camera_images - p.camera_copies) + " camera photos (" +
                                       std::to_string(p.camera_images) + " with their processed copies)";
  const std::string from = "from " + photos + " in " + std::to_string(p.camera_groups) + " groups";
  const std::string conf = percent_text(p.confidence);
  if (p.met)
    return "camera false-positive rate at most " + percent_text(p.bound) + " with " + conf + " confidence, " +
           from;
  // Unmet: the threshold already sits where nothing is flagged, so the bound is the tightest these
  // images support. Say that, what the target needs, and how to promise what is supported.
  char threshold[32];
  std::snprintf(threshold, sizeof threshold, "%.4f", t.likely_generated);
  char supported[32];
  std::snprintf(supported, sizeof supported, "%.3g", std::ceil(p.bound * 1000.0) / 1000.0);
  return "the target of " + percent_text(t.target_fpr) + " cannot be promised " + from +
         ". What they support: at most " + percent_text(p.bound) + " with " + conf +
         " confidence, with likely-generated at p >= " + threshold + ". " + std::to_string(p.groups_needed) +
         " more independent camera groups (none scored as generated) are needed for " +
         percent_text(t.target_fpr) + "; or set --target-fpr " + supported +
         " to promise what is supported (the target is never lowered silently)";
}

void apply_calibration(Model& model, const Calibrated& c, double target_fpr, double generated_miss) {
  model.thresholds.target_fpr = target_fpr;
  model.thresholds.generated_miss = generated_miss;
  model.thresholds.likely_generated = c.likely_generated;
  model.thresholds.promise = c.promise;
  if (c.likely_camera) model.thresholds.likely_camera = *c.likely_camera;
  model.thresholds.likely_camera =
      std::min(model.thresholds.likely_camera, std::min(1.0, c.likely_generated));
  model.calibration_set = c.record;
  model.camera_tail = c.tail;
}

double pooled_margin(const std::vector<double>& window_margins, const std::string& pooling,
                     std::vector<size_t>* chosen) {
  std::vector<size_t> order(window_margins.size());
  for (size_t i = 0; i < order.size(); ++i) order[i] = i;
  size_t keep = order.size();
  if (pooling == "top-third") {
    keep = std::max<size_t>(1, (order.size() + 2) / 3);
    std::stable_sort(order.begin(), order.end(),
                     [&](size_t a, size_t b) { return window_margins[a] > window_margins[b]; });
    order.resize(keep);
  }
  double sum = 0.0;
  for (size_t i : order) sum += window_margins[i];
  if (chosen != nullptr) *chosen = order;
  return keep > 0 ? sum / static_cast<double>(keep) : 0.0;
}

FeatureVector model_vector(const Model& model, const FeatureVector& features) {
  FeatureVector out = features;
  if (model.camera_pixels) fill_surprise(*model.camera_pixels, out);
  return out;
}

namespace {

CameraOnlyScore camera_only_score(const Model& model, const FeatureVector& filled) {
  CameraOnlyScore c;
  std::vector<double> values(model.feature_index.size());
  for (size_t k = 0; k < values.size(); ++k) values[k] = filled.values[model.feature_index[k]];
  c.gap = image_gap(filled.values);
  c.density = model.camera_only->density->score(values, &c.distance);
  c.score = model.camera_only->combine(c.gap, c.density);
  if (const auto& tail = model.camera_only->tail; tail && !tail->margins.empty()) {
    c.tail = tail->position(c.score);
    c.unusual = c.tail->p_value <= model.camera_only->unusual;
  }
  const auto gaps = window_gaps(filled);
  if (!gaps.empty()) {
    double mean = 0.0;
    for (double g : gaps) mean += g / static_cast<double>(gaps.size());
    double var = 0.0;
    for (double g : gaps) var += (g - mean) * (g - mean) / static_cast<double>(gaps.size());
    c.gap_spread = std::sqrt(var);
    c.gap_max = *std::max_element(gaps.begin(), gaps.end());
  }
  return c;
}

std::string unusual_reason(const CameraOnlyScore& c) {
  char buf[120];
  std::snprintf(buf, sizeof buf, "unusual for a camera photo: the camera-only score %.2f is reached by ",
                c.score);
  return buf + tail_text(*c.tail) + " (conformal p-value " + percent_text(c.tail->p_value) +
         "), though the two-class score does not call it likely-generated";
}

Score score_camera_only(const Model& model, const FeatureVector& filled, const Thresholds& t) {
  Score s;
  s.camera_only = camera_only_score(model, filled);
  s.margin = model.camera_only->margin(s.camera_only->score);
  const double families = static_cast<double>(std::max<size_t>(1, s.camera_only->distance.size()));
  // Contributions: each family's share of the squared density, and the gap's z-value under "surprise".
  for (const auto& [family, d] : s.camera_only->distance) {
    s.contributions[family] = d * d / families;
    s.distances[family] = d;
  }
  const CameraOnly& co = *model.camera_only;
  s.contributions["surprise"] += (co.gap_median - s.camera_only->gap) / co.gap_spread;
  s.p_generated = model.calibration.probability(s.margin);
  s.band = band_of(t, s.p_generated);
  if (s.band == "inconclusive") {
    char buf[200];
    std::snprintf(buf, sizeof buf,
                  "the camera-only score (p %.4f) is below the likely-generated threshold (%.4f); a "
                  "camera-only model saw no generated image and never calls one likely-camera",
                  s.p_generated, t.likely_generated);
    s.reasons.emplace_back(buf);
  }
  return s;
}

}  // namespace

Score score(const Model& model, const FeatureVector& given, std::optional<double> prior,
            const ProcessingEvidence* processing, const Thresholds* thresholds) {
  const FeatureVector features = model_vector(model, given);
  const Thresholds& t = thresholds != nullptr ? *thresholds : model.thresholds;
  const bool has_density = model.camera_only && model.camera_only->density;
  if (model.kind == "camera-only" && has_density) return score_camera_only(model, features, t);
  Score s;
  s.margin = model.linear.bias;
  std::map<std::string, int> members;
  std::vector<double> zs(model.feature_index.size());
  // The vector the linear part sees: the image's, or the mean of the windows the pooling chose
  // (the margin is linear, so the mean of their margins is the margin of their mean).
  std::vector<double> pooled;
  if (model.instances == "windows" && !features.windows.empty()) {
    std::vector<double> margins;
    for (const auto& w : features.windows) {
      double m = model.linear.bias;
      for (size_t k = 0; k < model.feature_index.size(); ++k)
        m += model.linear.weights[k] * (w[model.feature_index[k]] - model.scaler.mean[k]) /
             model.scaler.scale[k];
      margins.push_back(m);
    }
    std::vector<size_t> chosen;
    (void)pooled_margin(margins, model.pooling, &chosen);
    pooled.assign(model.feature_index.size(), 0.0);
    for (size_t i : chosen) {
      for (size_t k = 0; k < model.feature_index.size(); ++k)
        pooled[k] += features.windows[i][model.feature_index[k]] / static_cast<double>(chosen.size());
    }
  }
  for (size_t k = 0; k < model.feature_index.size(); ++k) {
    const double z = (features.values[model.feature_index[k]] - model.scaler.mean[k]) / model.scaler.scale[k];
    zs[k] = z;
    const double zl = pooled.empty() ? z : (pooled[k] - model.scaler.mean[k]) / model.scaler.scale[k];
    const double c = model.linear.weights[k] * zl;
    s.margin += c;
    s.contributions[model.families[k]] += c;
    s.distances[model.families[k]] += z * z;
    members[model.families[k]] += 1;
  }
  for (auto& [family, d] : s.distances) d = std::sqrt(d / members[family]);
  s.p_generated = model.calibration.probability(s.margin);
  if (prior) s.p_generated = shift_prior(s.p_generated, model.training_prior, *prior);
  s.band = band_of(t, s.p_generated);
  if (model.applicability) {
    s.domain = check_domain(*model.applicability, zs, processing);
    s.reasons = s.domain->reasons;
  }
  if (has_density) {
    s.camera_only = camera_only_score(model, features);
    if (s.camera_only->unusual && s.band != "likely-generated")
      s.reasons.push_back(unusual_reason(*s.camera_only));
  }
  if (!s.reasons.empty()) {
    s.band = "inconclusive";
  } else if (s.band == "inconclusive") {
    char buf[200];
    std::snprintf(buf, sizeof buf,
                  "the score (p %.3f) lies between the likely-camera threshold (%.3f) and the "
                  "likely-generated threshold (%.3f)",
                  s.p_generated, t.likely_camera, t.likely_generated);
    s.reasons.emplace_back(buf);
  }
  return s;
}

Result<std::vector<size_t>> select_features(const std::vector<std::string>& prefixes) {
  const auto& names = feature_names();
  std::vector<size_t> index;
  for (size_t i = 0; i < names.size(); ++i) {
    // By default every value but the coding surprise's: with them the SVM put 1 to 2 more camera
    // photos in 603 into likely-generated after halving or blurring (docs/quality.md); the camera
    // model reads them instead (camera_model.hpp). `--only surprise.` gives them to the SVM.
    bool keep = prefixes.empty() && !names[i].starts_with(kSurprisePrefix);
    for (const auto& p : prefixes) keep = keep || names[i].starts_with(p);
    if (keep) index.push_back(i);
  }
  for (const auto& p : prefixes) {
    bool matched = false;
    for (const auto& n : names) matched = matched || n.starts_with(p);
    if (!matched) return make_error(ErrorCode::kUnsupported, "no feature name starts with '" + p + "'");
  }
  return index;
}

nlohmann::ordered_json model_to_json(const Model& m) {
  nlohmann::ordered_json j;
  j["format"] = kModelFormat;
  j["format_version"] = kModelFormatVersion;
  j["id"] = m.id;
  j["created"] = m.created;
  j["schema"] = {
      {"extractor_version", m.extractor_version}, {"schema_id", m.schema_id}, {"features", m.features}};
  j["scaler"] = {{"mean", m.scaler.mean}, {"scale", m.scaler.scale}};
  j["linear"] = {{"weights", m.linear.weights}, {"bias", m.linear.bias}};
  j["learning"] = {{"instances", m.instances}, {"pooling", m.pooling}};
  j["calibration"] = {{"method", "platt-lin-lin-weng-2007"},
                      {"a", m.calibration.a},
                      {"b", m.calibration.b},
                      {"training_prior", m.training_prior}};
  j["thresholds"] = {{"likely_generated", m.thresholds.likely_generated},
                     {"likely_camera", m.thresholds.likely_camera},
                     {"target_fpr", m.thresholds.target_fpr},
                     {"generated_miss", m.thresholds.generated_miss}};
  if (const auto& p = m.thresholds.promise) {
    j["thresholds"]["promise"] = {{"confidence", p->confidence},
                                  {"camera_images", p->camera_images},
                                  {"camera_groups", p->camera_groups},
                                  {"false_positive_images", p->false_positive_images},
                                  {"false_positive_groups", p->false_positive_groups},
                                  {"fpr_upper_bound", p->bound},
                                  {"met", p->met},
                                  {"groups_needed", p->groups_needed},
                                  {"camera_copies", p->camera_copies},
                                  {"text", promise_text(m.thresholds)}};
  }
  j["provenance"] = m.provenance;
  if (m.reference) j["training_reference"] = reference_to_json(*m.reference);
  if (m.applicability) j["applicability"] = applicability_to_json(*m.applicability);
  if (m.calibration_set) j["calibration_set"] = calibration_record_to_json(*m.calibration_set);
  if (m.camera_tail) j["camera_tail"] = camera_tail_to_json(*m.camera_tail);
  j["kind"] = m.kind;
  if (m.camera_pixels) j["camera_pixels"] = camera_pixels_to_json(*m.camera_pixels);
  if (m.camera_only) j["camera_only"] = camera_only_to_json(*m.camera_only);
  return j;
}

namespace {

// The values the loader converts to integers (counts, indices, histogram bins) must be JSON
// integers: converting a floating-point value out of the integer's range, a negative count say, is
// undefined behaviour in the conversion (found by fuzz_model). `key` is the member holding `j`.
bool counts_are_integers(const nlohmann::json& j, const std::string& key) {
  static const std::set<std::string> kCounts = {"camera_images",
                                                "camera_groups",
                                                "false_positive_images",
                                                "false_positive_groups",
                                                "groups_needed",
                                                "min_support",
                                                "columns",
                                                "images",
                                                "quantised",
                                                "lossy_webp",
                                                "screenshot_like",
                                                "double_jpeg",
                                                "format_version",
                                                "groups",
                                                "camera_guarded",
                                                "generated_images",
                                                "copies",
                                                "unreadable",
                                                "camera_copies"};
  if (j.is_object()) {
    const auto members = j.items();
    return std::all_of(members.begin(), members.end(),
                       [](const auto& member) { return counts_are_integers(member.value(), member.key()); });
  }
  if (j.is_array()) {
    return std::all_of(j.begin(), j.end(),
                       [&](const nlohmann::json& v) { return counts_are_integers(v, key); });
  }
  const bool bin = !key.empty() && key.find_first_not_of("-0123456789") == std::string::npos;
  return !((kCounts.contains(key) || bin) && j.is_number_float());
}

}  // namespace

Result<Model> model_from_json(const nlohmann::json& j) {
  if (!counts_are_integers(j, "")) {
    return make_error(ErrorCode::kCorrupt, "model file is damaged: a count or index is not a whole number");
  }
  try {
    if (j.at("format") != kModelFormat)
      return make_error(ErrorCode::kUnsupported, "not a residue model file");
    if (j.at("format_version") != kModelFormatVersion) {
      return make_error(ErrorCode::kUnsupported, "model format version " + j.at("format_version").dump() +
                                                     " is not supported (this residue reads version " +
                                                     std::to_string(kModelFormatVersion) + ")");
    }
    Model m;
    m.id = j.at("id");
    m.created = j.at("created");
    m.extractor_version = j.at("schema").at("extractor_version");
    m.schema_id = j.at("schema").at("schema_id");
    // Extractor 3.0.0 added the coding surprise and left the 887 values of 2.0.0 bit for bit as they
    // were: a 2.0.0 model still scores exactly as it did (by name), without the new family.
    const bool earlier_compatible = m.extractor_version == kCompatibleExtractorVersion;
    if (earlier_compatible) {
      m.note = "model trained with feature extractor " + m.extractor_version + ": its values are unchanged in " +
               std::string(kExtractorVersion) +
               ", so it scores as it did, but it has no coding surprise and no camera-only score; retrain for "
               "them (the feature cache makes it quick)";
    } else if (m.extractor_version != kExtractorVersion || m.schema_id != feature_schema_id()) {
      return make_error(ErrorCode::kUnsupported,
                        "model was trained with feature extractor " + m.extractor_version + " (schema " +
                            m.schema_id + "); this residue extracts " + std::string(kExtractorVersion) +
                            " (schema " + feature_schema_id() +
                            "): retrain the model (the feature cache makes it quick)");
    }
    m.features = j.at("schema").at("features").get<std::vector<std::string>>();
    const auto& names = feature_names();
    const auto& families = feature_families();
    for (const auto& f : m.features) {
      const auto it = std::find(names.begin(), names.end(), f);
      if (it == names.end())
        return make_error(ErrorCode::kCorrupt, "model names an unknown feature '" + f + "'");
      m.feature_index.push_back(static_cast<size_t>(it - names.begin()));
      m.families.push_back(families[m.feature_index.back()]);
    }
    m.scaler.mean = j.at("scaler").at("mean").get<std::vector<double>>();
    m.scaler.scale = j.at("scaler").at("scale").get<std::vector<double>>();
    m.linear.weights = j.at("linear").at("weights").get<std::vector<double>>();
    m.linear.bias = j.at("linear").at("bias");
    if (j.contains("learning")) {  // absent in models from before window-level learning: image-level
      m.instances = j["learning"].value("instances", std::string("image"));
      m.pooling = j["learning"].value("pooling", std::string());
      if (m.instances != "image" && m.instances != "windows")
        return make_error(ErrorCode::kCorrupt, "model's learning.instances is neither image nor windows");
    }
    m.calibration.a = j.at("calibration").at("a");
    m.calibration.b = j.at("calibration").at("b");
    m.training_prior = j.at("calibration").at("training_prior");
    m.thresholds.likely_generated = j.at("thresholds").at("likely_generated");
    m.thresholds.likely_camera = j.at("thresholds").at("likely_camera");
    m.thresholds.target_fpr = j.at("thresholds").at("target_fpr");
    m.thresholds.generated_miss = j.at("thresholds").at("generated_miss");
    if (j.at("thresholds").contains("promise")) {
      const auto& p = j["thresholds"]["promise"];
      m.thresholds.promise = FprPromise{p.at("confidence"),
                                        p.at("camera_images"),
                                        p.at("camera_groups"),
                                        p.at("false_positive_images"),
                                        p.at("false_positive_groups"),
                                        p.at("fpr_upper_bound"),
                                        p.at("met"),
                                        p.at("groups_needed"),
                                        p.value("camera_copies", size_t{0})};
    }
    m.provenance = j.value("provenance", nlohmann::ordered_json::object());
    if (j.contains("training_reference")) {
      m.reference = reference_from_json(j["training_reference"]);
      if (!m.reference) return make_error(ErrorCode::kCorrupt, "model's training reference is damaged");
    }
    const size_t d = m.features.size();
    if (j.contains("applicability")) {
      m.applicability = applicability_from_json(j["applicability"]);
      for (const auto& f : m.applicability->families) {
        for (size_t c : f.columns) {
          if (c >= d)
            return make_error(ErrorCode::kCorrupt,
                              "model's applicability reference names a feature it lacks");
        }
      }
    }
    if (j.contains("calibration_set")) m.calibration_set = calibration_record_from_json(j["calibration_set"]);
    if (j.contains("camera_tail")) m.camera_tail = camera_tail_from_json(j["camera_tail"]);
    m.kind = j.value("kind", std::string("two-class"));
    if (m.kind != "two-class" && m.kind != "camera-only")
      return make_error(ErrorCode::kCorrupt, "model's kind is neither two-class nor camera-only");
    if (j.contains("camera_pixels")) m.camera_pixels = camera_pixels_from_json(j["camera_pixels"]);
    if (j.contains("camera_only")) {
      m.camera_only = camera_only_from_json(j["camera_only"]);
      if (m.camera_only->density && m.camera_only->density->scaler.mean.size() != d)
        return make_error(ErrorCode::kCorrupt, "model's camera-only density does not match its feature list");
    }
    if (m.kind == "camera-only" && !(m.camera_only && m.camera_only->density))
      return make_error(ErrorCode::kCorrupt, "camera-only model without its camera-only density");
    if (m.scaler.mean.size() != d || m.scaler.scale.size() != d || m.linear.weights.size() != d) {
      return make_error(ErrorCode::kCorrupt, "model arrays do not match its feature list");
    }
    for (double s : m.scaler.scale) {
      if (!(s > 0)) return make_error(ErrorCode::kCorrupt, "model scaler has a non-positive scale");
    }
    return m;
  } catch (const nlohmann::json::exception& e) {
    return make_error(ErrorCode::kCorrupt, std::string("model file is incomplete or damaged: ") + e.what());
  } catch (const std::exception& e) {  // e.g. std::stoi on a histogram key that is not a number
    return make_error(ErrorCode::kCorrupt, std::string("model file is damaged: ") + e.what());
  }
}

void stamp_model_id(Model& model) {
  model.id.clear();
  nlohmann::ordered_json content = model_to_json(model);
  content.erase("created");
  if (content["provenance"].is_object()) content["provenance"].erase("preparation");
  if (content.contains("calibration_set")) content["calibration_set"].erase("created");
  const std::string body = content.dump();
  model.id =
      "m-" +
      sha256_hex(std::span(reinterpret_cast<const std::uint8_t*>(body.data()), body.size())).substr(0, 16);
}

Result<bool> save_model(const Model& model, const std::filesystem::path& path) {
  return write_file_atomically(path, model_to_json(model).dump(2) + "\n");
}

Result<Model> load_model(const std::filesystem::path& path) {
  std::ifstream in(path);
  if (!in) return make_error(ErrorCode::kUnreadable, "cannot open model " + path.string());
  std::stringstream text;
  text << in.rdbuf();
  nlohmann::json j = nlohmann::json::parse(text.str(), nullptr, false);
  if (j.is_discarded()) return make_error(ErrorCode::kCorrupt, path.string() + " is not valid JSON");
  auto model = model_from_json(j);
  if (!model) return make_error(model.error().code, path.string() + ": " + model.error().message);
  return model;
}

}  // namespace residue
