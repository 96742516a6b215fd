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

Result<Explanation> explain_image(const std::string& image, const Model& model, const ScanSettings& settings,
                                  const std::filesystem::path& output_dir) {
  const auto record = scan_file(image, model, settings);
  if (record.contains("error")) {
    return make_error(ErrorCode::kCorrupt, record["error"]["message"].get<std::string>());
  }
  auto bytes = read_file(image, settings.extract.limits);
  auto windows = bytes ? decode_windows(*bytes, settings.extract.limits, settings.extract.windows)
                       : Result<DecodedWindows>(bytes.error());
  auto preview = bytes ? decode_image(*bytes, settings.extract.limits) : Result<Image>(bytes.error());
  if (!windows || !preview) return make_error(ErrorCode::kCorrupt, "cannot decode the image for pictures");
  std::error_code ec;
  std::filesystem::create_directories(output_dir, ec);
  const std::filesystem::path& dir = output_dir;
  const Tile& tile = windows->tiles[windows->tiles.size() / 2];
  const auto luma = tile.luma();
  const auto residual = denoise_residual(luma.data(), tile.size);
  const auto pmap = centred_kirchner_pmap(luma.data(), tile.size);
  // The residual of a very large image is cropped to its centre so the picture stays viewable.
  const Image& full = *preview;
  const int side = std::min({full.width, full.height, 1024});
  const Image centre = crop(full, (full.width - side) / 2, (full.height - side) / 2, side, side);
  const std::map<std::string, double> contributions =
      record["contributions"].get<std::map<std::string, double>>();
  const bool ok =
      write_png(residual_picture(centre), dir / "noise_residual.png").ok() &&
      write_png(enlarge(spectrum_picture(residual, tile.size, true), 2), dir / "residual_spectrum.png")
          .ok() &&
      write_png(enlarge(spectrum_picture(pmap, tile.size, false), 2), dir / "resampling_pmap_spectrum.png")
          .ok() &&
      write_file_atomically(dir / "contributions.svg", bar_chart_svg(contributions,
                                                                     "Contribution to the margin by family "
                                                                     "(red: towards generated)"))
          .ok();
  // Strongest single values: |w z| largest.
  std::vector<std::pair<double, std::string>> evidence;
  const auto features = extract_tiles(windows->tiles);
  for (size_t k = 0; k < model.features.size(); ++k) {
    const double z = (features.values[model.feature_index[k]] - model.scaler.mean[k]) / model.scaler.scale[k];
    evidence.emplace_back(model.linear.weights[k] * z, model.features[k]);
  }
  std::sort(evidence.begin(), evidence.end(),
            [](const auto& a, const auto& b) { return std::fabs(a.first) > std::fabs(b.first); });
  nlohmann::ordered_json summary = record;
  summary["strongest_evidence"] = nlohmann::ordered_json::array();
  for (size_t i = 0; i < std::min<size_t>(8, evidence.size()); ++i) {
    summary["strongest_evidence"].push_back(
        {{"feature", evidence[i].second},
         {"contribution", evidence[i].first},
         {"direction", evidence[i].first >= 0 ? "towards generated" : "towards camera"}});
  }
  summary["pictures"] = {"noise_residual.png", "residual_spectrum.png", "resampling_pmap_spectrum.png",
                         "contributions.svg"};
  std::string text = "residue explain: " + image + "\n";
  char line[256];
  std::snprintf(line, sizeof line, "P(generated) = %.3f, band %s, margin %+.3f (model %s)\n",
                record["p_generated"].get<double>(), record["band"].get<std::string>().c_str(),
                record["margin"].get<double>(), model.id.c_str());
  text += line;
  if (record.contains("reasons") && !record["reasons"].empty()) {
    text += "Why inconclusive:\n";
    for (const auto& reason : record["reasons"]) text += "  - " + reason.get<std::string>() + "\n";
  }
  if (record.contains("processing")) {
    text += "Processing found (reported, never learned):";
    const auto& notes = record["processing"]["notes"];
    if (notes.empty()) text += " none";
    text += "\n";
    for (const auto& note : notes) text += "  - " + note.get<std::string>() + "\n";
  }
  if (record.contains("in_domain")) {
    text += record["in_domain"].is_null()
                ? "Inside the training domain: unknown (the model has no applicability reference)\n"
                : std::string("Inside the training domain: ") +
                      (record["in_domain"].get<bool>() ? "yes" : "no") + "\n";
  }
  text += "Strongest evidence (weight x standardised value):\n";
  for (size_t i = 0; i < std::min<size_t>(8, evidence.size()); ++i) {
    std::snprintf(line, sizeof line, "  %+7.3f  %s\n", evidence[i].first, evidence[i].second.c_str());
    text += line;
  }
  text +=
      "Pictures: noise_residual.png (centre of the image), residual_spectrum.png (red marks at the N/8 grid\n"
      "where upsampling leaves peaks), resampling_pmap_spectrum.png, contributions.svg\n\n" +
      std::string(kAdvisoryNotice) + "\n";
  if (!ok ||
      !write_file_atomically(
           dir / "summary.json",
           summary.dump(2, ' ', false, nlohmann::ordered_json::error_handler_t::replace) + "\n")
           .ok() ||
      !write_file_atomically(dir / "summary.txt", text).ok()) {
    return make_error(ErrorCode::kInternal, "cannot write into " + output_dir.string());
  }
  return Explanation{summary, text};
}

}  // namespace residue
