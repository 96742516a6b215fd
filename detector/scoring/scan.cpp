#include "residue/detector/scoring/scan.hpp"

#include "residue/detector/scoring/record.hpp"
#include "residue/features/fingerprint.hpp"
#include "residue/training/carried.hpp"

namespace residue {

Thresholds effective_thresholds(const Model& model, const ScanSettings& s) {
  Thresholds t = model.thresholds;
  if (s.likely_generated) t.likely_generated = *s.likely_generated;
  if (s.likely_camera) t.likely_camera = *s.likely_camera;
  t.likely_camera = std::min(t.likely_camera, t.likely_generated);
  return t;
}

nlohmann::ordered_json declared_json(const DeclaredMetadata& m) {
  const bool any = !m.digital_source_type.empty() || m.c2pa_manifest || m.generation_text ||
                   !m.camera_make.empty() || !m.camera_model.empty();
  if (!any) return nullptr;
  nlohmann::ordered_json j;
  j["digital_source_type"] = m.digital_source_type.empty() ? nlohmann::ordered_json(nullptr)
                                                           : nlohmann::ordered_json(m.digital_source_type);
  j["declares_generated"] = declares_generated(m.digital_source_type) || m.generation_text;
  j["c2pa_manifest"] = m.c2pa_manifest;
  j["generation_settings_text"] = m.generation_text;
  j["camera_make"] =
      m.camera_make.empty() ? nlohmann::ordered_json(nullptr) : nlohmann::ordered_json(m.camera_make);
  j["camera_model"] =
      m.camera_model.empty() ? nlohmann::ordered_json(nullptr) : nlohmann::ordered_json(m.camera_model);
  return j;
}

nlohmann::ordered_json scan_bytes(const std::string& path, std::span<const std::uint8_t> bytes,
                                  const Model& model, const ScanSettings& settings) {
  nlohmann::ordered_json r;
  set_path(r, path);
  r["sha256"] = sha256_hex(bytes);
  auto extraction = extract_bytes(bytes, settings.extract);
  if (!extraction) {
    r["error"] = {{"code", std::string(error_code_name(extraction.error().code))},
                  {"message", extraction.error().message}};
    r["model"] = model.id;
    r["advisory"] = kAdvisoryNotice;
    return r;
  }
  const Thresholds t = effective_thresholds(model, settings);
  const Score s = score(model, extraction->features, settings.prior, &extraction->processing, &t);
  r["width"] = extraction->header.width;
  r["height"] = extraction->header.height;
  r["format"] = std::string(image_format_name(extraction->header.format));
  r["p_generated"] = s.p_generated;
  r["band"] = s.band;
  r["margin"] = s.margin;
  r["contributions"] = s.contributions;
  r["declared"] = declared_json(read_metadata(bytes));
  r["model"] = model.id;
  r["advisory"] = kAdvisoryNotice;
  // What limits the score: processing evidence (reported, never learned), whether the image lies
  // inside what the training data showed, and why the record is inconclusive.
  r["processing"] = processing_to_json(extraction->processing);
  // What the decoder reported and decoded past; a damaged file is inconclusive (the reasons say so).
  r["decoder_warnings"] = decoder_warnings_to_json(extraction->processing.decoder_warnings);
  r["in_domain"] = s.domain ? nlohmann::ordered_json(s.domain->in_domain) : nlohmann::ordered_json(nullptr);
  if (s.domain) {
    r["applicability"] = {{"distance", s.domain->distance},
                          {"limit", s.domain->limit},
                          {"families_out", s.domain->families_out}};
  } else {
    r["applicability"] = {{"note",
                           "this model has no applicability reference (trained before residue "
                           "recorded one): whether the image is inside its domain is unknown; retrain"}};
  }
  r["reasons"] = s.reasons;
  // How unusual the score is among calibration camera photos (conformal.hpp): meaningful with any
  // amount of data, so shown whether or not the threshold's promise is met.
  if (model.camera_tail) {
    r["camera_tail"] = tail_to_record(*model.camera_tail, s.margin);
  } else {
    r["camera_tail"] = nullptr;
    r["camera_tail_note"] =
        "this model records no calibration camera scores (trained before residue recorded them): "
        "retrain or run residue calibrate to get the camera tail";
  }
  if (!model.note.empty()) r["model_note"] = model.note;
  // The camera-only model's view (camera_model.hpp): how unusual the image is for a camera photo,
  // with no generator in mind, and the coding surprise behind it.
  if (s.camera_only) {
    const CameraOnlyScore& c = *s.camera_only;
    nlohmann::ordered_json co = {{"score", c.score},
                                 {"unusual", c.unusual},
                                 {"density", c.density},
                                 {"family_distance", c.distance},
                                 {"gap_bits_per_pixel", c.gap},
                                 {"window_gap_spread", c.gap_spread},
                                 {"window_gap_max", c.gap_max}};
    co["camera_tail"] = model.camera_only->tail ? tail_to_record(*model.camera_only->tail, c.score)
                                                : nlohmann::ordered_json(nullptr);
    if (model.kind == "camera-only") {
      co["note"] =
          "camera-only model: no generated image was seen in training; p_generated is the score's "
          "place among camera photos, not a probability that the image was generated";
    }
    r["camera_only"] = std::move(co);
  } else {
    r["camera_only"] = nullptr;
  }
  // Beyond the contract: what a reviewer may want to know about how the score was made.
  r["prior"] = settings.prior ? nlohmann::ordered_json(*settings.prior) : nlohmann::ordered_json(nullptr);
  r["windows"] = {{"size", extraction->layout.size},
                  {"count", extraction->layout.origins.size()},
                  {"reduced", extraction->layout.reduced}};
  r["alpha_dropped"] = extraction->alpha_dropped;
  // Per family: root-mean-square of the standardised features, in training standard deviations;
  // with the contributions, what `residue drift` compares with the model's training reference.
  r["family_distance"] = s.distances;
  if (settings.with_features) {
    PreparedItem item;
    item.facts = file_facts(*extraction, bytes, settings.extract.limits);
    item.features.values = std::move(extraction->features.values);
    const PreparedCopies copies =
        prepare_copies(bytes, r["sha256"].get<std::string>(), settings.extract, nullptr, settings.copies);
    r["features"] = carried_to_json(item, &copies, settings.copies);
  }
  return r;
}

nlohmann::ordered_json scan_file(const std::string& path, const Model& model, const ScanSettings& settings) {
  auto bytes = read_file(path, settings.extract.limits);
  if (!bytes) {
    nlohmann::ordered_json r;
    set_path(r, path);
    r["sha256"] = nullptr;
    r["error"] = {{"code", std::string(error_code_name(bytes.error().code))},
                  {"message", bytes.error().message}};
    r["model"] = model.id;
    r["advisory"] = kAdvisoryNotice;
    return r;
  }
  return scan_bytes(path, *bytes, model, settings);
}

}  // namespace residue
