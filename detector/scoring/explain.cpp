#include "residue/detector/scoring/explain.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "residue/detector/scoring/pictures.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/features/decode.hpp"
#include "residue/features/families.hpp"
#include "residue/training/atomic_file.hpp"

namespace residue {

namespace {

using Json = nlohmann::ordered_json;

// The error a scan record carries, back as an Error.
Error record_error(const Json& record) {
  const auto name = record["error"]["code"].get<std::string>();
  ErrorCode code = ErrorCode::kInternal;
  for (int c = 0; c <= static_cast<int>(ErrorCode::kInternal); ++c) {
    if (error_code_name(static_cast<ErrorCode>(c)) == name) code = static_cast<ErrorCode>(c);
  }
  return make_error(code, record["error"]["message"].get<std::string>());
}

// The summary for a person, with the advisory notice.
std::string summary_text(const std::string& name, const Json& summary, const Model& model) {
  std::string text = "residue explain: " + name + "\n";
  char line[256];
  std::snprintf(line, sizeof line, "P(generated) = %.3f, band %s, margin %+.3f (model %s)\n",
                summary["p_generated"].get<double>(), summary["band"].get<std::string>().c_str(),
                summary["margin"].get<double>(), model.id.c_str());
  text += line;
  std::snprintf(line, sizeof line, "Thresholds: likely-generated at P >= %.3f, likely-camera below %.3f\n",
                summary["thresholds"]["likely_generated"].get<double>(),
                summary["thresholds"]["likely_camera"].get<double>());
  text += line;
  if (summary.contains("camera_tail") && summary["camera_tail"].is_object()) {
    text += "Among camera photos: " + summary["camera_tail"]["text"].get<std::string>() +
            " (conformal p-value " +
            std::to_string(summary["camera_tail"]["p_value"].get<double>()).substr(0, 6) + ")\n";
  } else if (summary.contains("camera_tail_note")) {
    text += "Among camera photos: unknown; " + summary["camera_tail_note"].get<std::string>() + "\n";
  }
  if (summary.contains("reasons") && !summary["reasons"].empty()) {
    text += "Why inconclusive:\n";
    for (const auto& reason : summary["reasons"]) text += "  - " + reason.get<std::string>() + "\n";
  }
  if (summary.contains("processing")) {
    text += "Processing found (reported, never learned):";
    const auto& notes = summary["processing"]["notes"];
    if (notes.empty()) text += " none";
    text += "\n";
    for (const auto& note : notes) text += "  - " + note.get<std::string>() + "\n";
  }
  if (summary.contains("in_domain")) {
    text += summary["in_domain"].is_null()
                ? "Inside the training domain: unknown (the model has no applicability reference)\n"
                : std::string("Inside the training domain: ") +
                      (summary["in_domain"].get<bool>() ? "yes" : "no") + "\n";
  }
  text += model.kind == "camera-only"
              ? "Values furthest from camera photos (standardised on them; camera-only model, no weights):\n"
              : "Strongest evidence (weight x standardised value):\n";
  for (const auto& e : summary["strongest_evidence"]) {
    std::snprintf(line, sizeof line, "  %+7.3f  %s\n", e["contribution"].get<double>(),
                  e["feature"].get<std::string>().c_str());
    text += line;
  }
  return text;
}

}  // namespace

Result<Explanation> explain_bytes(const std::string& name, std::span<const std::uint8_t> bytes,
                                  const Model& model, const ScanSettings& settings) {
  const auto record = scan_bytes(name, bytes, model, settings);
  if (record.contains("error")) return record_error(record);
  auto windows = decode_windows(bytes, settings.extract.limits, settings.extract.windows);
  auto full = decode_image(bytes, settings.extract.limits);
  if (!windows) return windows.error();
  if (!full) return full.error();
  const Tile& tile = windows->tiles[windows->tiles.size() / 2];
  const auto luma = tile.luma();
  const auto residual = denoise_residual(luma.data(), tile.size);
  const auto pmap = centred_kirchner_pmap(luma.data(), tile.size);
  // The residual of a very large image is cropped to its centre so the picture stays viewable.
  const int side = std::min({full->width, full->height, 1024});
  const Image centre = crop(*full, (full->width - side) / 2, (full->height - side) / 2, side, side);
  Explanation out;
  out.pictures.preview = thumbnail(*full, 512);
  out.pictures.noise_residual = residual_picture(centre);
  out.pictures.residual_spectrum = enlarge(spectrum_picture(residual, tile.size, true), 2);
  out.pictures.pmap_spectrum = enlarge(spectrum_picture(pmap, tile.size, false), 2);
  if (model.camera_pixels)
    out.pictures.surprise_map = enlarge(surprise_picture(*model.camera_pixels, luma, tile.size), 2);
  out.pictures.contributions_svg =
      bar_chart_svg(record["contributions"].get<std::map<std::string, double>>(),
                    "Contribution to the margin by family (red: towards generated)");
  // Strongest single values: |w z| largest.
  std::vector<std::pair<double, std::string>> evidence;
  // A camera-only model has no weights: its strongest evidence is the values furthest from camera
  // photos (standardised on them, signed).
  const auto features =
      model_vector(model, extract_tiles(windows->tiles, nullptr, nullptr, settings.extract.window_threads));
  const bool camera_only = model.kind == "camera-only";
  for (size_t k = 0; k < model.features.size(); ++k) {
    const double z = (features.values[model.feature_index[k]] - model.scaler.mean[k]) / model.scaler.scale[k];
    evidence.emplace_back(camera_only ? z : model.linear.weights[k] * z, model.features[k]);
  }
  std::sort(evidence.begin(), evidence.end(),
            [](const auto& a, const auto& b) { return std::fabs(a.first) > std::fabs(b.first); });
  Json& summary = out.summary;
  summary = record;
  const Thresholds t = effective_thresholds(model, settings);
  summary["thresholds"] = {{"likely_generated", t.likely_generated},
                           {"likely_camera", t.likely_camera},
                           {"promise", promise_text(t)}};
  summary["strongest_evidence"] = Json::array();
  for (size_t i = 0; i < std::min<size_t>(8, evidence.size()); ++i) {
    summary["strongest_evidence"].push_back(
        {{"feature", evidence[i].second},
         {"contribution", evidence[i].first},
         {"direction", camera_only ? (evidence[i].first >= 0 ? "above camera photos" : "below camera photos")
                                   : (evidence[i].first >= 0 ? "towards generated" : "towards camera")}});
  }
  out.text = summary_text(name, summary, model);
  return out;
}

Result<Explanation> explain_image(const std::string& image, const Model& model, const ScanSettings& settings,
                                  const std::filesystem::path& output_dir) {
  auto bytes = read_file(image, settings.extract.limits);
  if (!bytes) return bytes.error();
  auto explained = explain_bytes(image, *bytes, model, settings);
  if (!explained) return explained.error();
  Explanation& e = *explained;
  const bool surprise = !e.pictures.surprise_map.samples.empty();
  e.summary["pictures"] = {"noise_residual.png", "residual_spectrum.png", "resampling_pmap_spectrum.png",
                           "contributions.svg"};
  if (surprise) e.summary["pictures"].push_back("coding_surprise.png");
  e.text +=
      "Pictures: noise_residual.png (centre of the image), residual_spectrum.png (red marks at the N/8 grid\n"
      "where upsampling leaves peaks), resampling_pmap_spectrum.png, contributions.svg" +
      std::string(
          surprise ? ",\ncoding_surprise.png (middle window: red where pixels cost more to code than camera "
                     "photos'\nin the same context, blue where less)"
                   : "") +
      "\n\n" + std::string(kAdvisoryNotice) + "\n";
  std::error_code ec;
  std::filesystem::create_directories(output_dir, ec);
  const std::filesystem::path& dir = output_dir;
  const bool ok = write_png(e.pictures.noise_residual, dir / "noise_residual.png").ok() &&
                  write_png(e.pictures.residual_spectrum, dir / "residual_spectrum.png").ok() &&
                  write_png(e.pictures.pmap_spectrum, dir / "resampling_pmap_spectrum.png").ok() &&
                  write_file_atomically(dir / "contributions.svg", e.pictures.contributions_svg).ok() &&
                  (!surprise || write_png(e.pictures.surprise_map, dir / "coding_surprise.png").ok()) &&
                  write_file_atomically(dir / "summary.json",
                                        e.summary.dump(2, ' ', false, Json::error_handler_t::replace) + "\n")
                      .ok() &&
                  write_file_atomically(dir / "summary.txt", e.text).ok();
  if (!ok) return make_error(ErrorCode::kInternal, "cannot write into " + output_dir.string());
  return explained;
}

}  // namespace residue
