// `residue report SCAN.jsonl... -o REPORT.html` and `residue explain MODEL IMAGE -o DIR`.
#include <fstream>
#include <iostream>
#include <memory>

#include "commands.hpp"
#include "residue/detector/evaluation_page.hpp"
#include "residue/detector/pictures.hpp"
#include "residue/detector/record.hpp"
#include "residue/detector/report_page.hpp"
#include "residue/detector/scan.hpp"
#include "residue/features/decode.hpp"
#include "residue/features/families.hpp"
#include "residue/training/atomic_file.hpp"

namespace residue::cli {

namespace {

struct ReportArgs {
  std::vector<std::string> scans;
  std::string output;
  std::string model_path;
  int top = 24;
};

struct ExplainArgs {
  std::string model_path;
  std::string image;
  std::string output_dir;
  ScanSettings settings;
};

int run_report(const ReportArgs& args) {
  ReportInput in;
  in.top = args.top;
  in.sources = args.scans;
  for (const auto& path : args.scans) {
    std::ifstream f(path);
    if (!f) {
      std::cerr << "residue report: cannot read " << path << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    std::string line;
    while (std::getline(f, line)) {
      if (line.empty()) continue;
      auto j = nlohmann::json::parse(line, nullptr, false);
      if (j.is_discarded() || !j.is_object() || !j.contains("path")) {
        ++in.unreadable_lines;
      } else {
        in.records.push_back(std::move(j));
      }
    }
  }
  if (!args.model_path.empty()) {
    auto model = load_model(args.model_path);
    if (!model) {
      std::cerr << "residue report: " << model.error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    in.model = std::move(*model);
  }
  if (auto w = write_file_atomically(args.output, report_page(in)); !w) {
    std::cerr << "residue report: " << w.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::cout << "residue report: " << in.records.size() << " records -> " << args.output << "\n";
  return 0;
}

int run_explain(const ExplainArgs& args) {
  namespace fs = std::filesystem;
  auto model = load_model(args.model_path);
  if (!model) {
    std::cerr << "residue explain: " << model.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  const auto record = scan_file(args.image, *model, args.settings);
  if (record.contains("error")) {
    std::cerr << "residue explain: " << args.image << ": " << record["error"]["message"].get<std::string>() << "\n";
    return static_cast<int>(ExitCode::kSomeInputsFailed);
  }
  auto bytes = read_file(args.image, args.settings.extract.limits);
  auto windows = bytes ? decode_windows(*bytes, args.settings.extract.limits, args.settings.extract.windows)
                       : Result<DecodedWindows>(bytes.error());
  auto preview = bytes ? decode_image(*bytes, args.settings.extract.limits) : Result<Image>(bytes.error());
  if (!windows || !preview) {
    std::cerr << "residue explain: " << args.image << ": cannot decode for pictures\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  fs::create_directories(args.output_dir);
  const fs::path dir = args.output_dir;
  const Tile& tile = windows->tiles[windows->tiles.size() / 2];
  const auto luma = tile.luma();
  const auto residual = denoise_residual(luma.data(), tile.size);
  auto pmap = kirchner_pmap(luma.data(), tile.size);
  double mean = 0;
  for (float v : pmap) mean += v;
  for (float& v : pmap) v -= static_cast<float>(mean / static_cast<double>(pmap.size()));
  // The residual of a very large image is cropped to its centre so the picture stays viewable.
  const Image& full = *preview;
  const int side = std::min({full.width, full.height, 1024});
  Image centre = Image::zeros(side, side, full.channels);
  for (int c = 0; c < full.channels; ++c) {
    for (int y = 0; y < side; ++y) {
      for (int x = 0; x < side; ++x) {
        centre.plane(c)[static_cast<size_t>(y) * side + x] =
            full.plane(c)[static_cast<size_t>((full.height - side) / 2 + y) * full.width + (full.width - side) / 2 + x];
      }
    }
  }
  const std::map<std::string, double> contributions = record["contributions"].get<std::map<std::string, double>>();
  const bool ok = write_png(residual_picture(centre), dir / "noise_residual.png").ok() &&
                  write_png(spectrum_picture(residual, tile.size, true), dir / "residual_spectrum.png").ok() &&
                  write_png(spectrum_picture(pmap, tile.size, false), dir / "resampling_pmap_spectrum.png").ok() &&
                  write_file_atomically(dir / "contributions.svg",
                                        bar_chart_svg(contributions, "Contribution to the margin by family "
                                                                     "(red: towards generated)"))
                      .ok();
  // Strongest single values: |w z| largest.
  std::vector<std::pair<double, std::string>> evidence;
  const auto features = extract_tiles(windows->tiles);
  for (size_t k = 0; k < model->features.size(); ++k) {
    const double z = (features.values[model->feature_index[k]] - model->scaler.mean[k]) / model->scaler.scale[k];
    evidence.emplace_back(model->linear.weights[k] * z, model->features[k]);
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
  std::string text = "residue explain: " + args.image + "\n";
  char line[256];
  std::snprintf(line, sizeof line, "P(generated) = %.3f, band %s, margin %+.3f (model %s)\n",
                record["p_generated"].get<double>(), record["band"].get<std::string>().c_str(),
                record["margin"].get<double>(), model->id.c_str());
  text += line;
  text += "Strongest evidence (weight x standardised value):\n";
  for (size_t i = 0; i < std::min<size_t>(8, evidence.size()); ++i) {
    std::snprintf(line, sizeof line, "  %+7.3f  %s\n", evidence[i].first, evidence[i].second.c_str());
    text += line;
  }
  text += "Pictures: noise_residual.png (centre of the image), residual_spectrum.png (red marks at the N/8 grid\n"
          "where upsampling leaves peaks), resampling_pmap_spectrum.png, contributions.svg\n\n" +
          std::string(kAdvisoryNotice) + "\n";
  if (!ok || !write_file_atomically(dir / "summary.json", summary.dump(2) + "\n").ok() ||
      !write_file_atomically(dir / "summary.txt", text).ok()) {
    std::cerr << "residue explain: cannot write into " << args.output_dir << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::cout << text;
  return 0;
}

}  // namespace

void add_report_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<ReportArgs>();
  auto* cmd = app.add_subcommand("report", "Write one self-contained HTML report from scan outputs");
  cmd->add_option("scans", args->scans, "JSON-lines outputs of residue scan (shards may be given together)")
      ->required();
  cmd->add_option("-o,--output", args->output, "HTML file to write (atomically)")->required();
  cmd->add_option("--model", args->model_path, "the model file, to include its provenance");
  cmd->add_option("--top", args->top, "highest-scoring files shown with pictures")
      ->check(CLI::Range(0, 500))
      ->capture_default_str();
  cmd->callback([args, &exit_code] { exit_code = run_report(*args); });
}

void add_explain_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<ExplainArgs>();
  auto* cmd = app.add_subcommand("explain", "Write pictures and a summary of why one image scored as it did");
  cmd->add_option("model", args->model_path, "model file")->required();
  cmd->add_option("image", args->image, "image file")->required();
  cmd->add_option("-o,--output-dir", args->output_dir, "folder for the pictures and summary")->required();
  cmd->add_option("--prior", args->settings.prior, "deployment share of generated images")
      ->check(CLI::Range(0.0001, 0.9999));
  cmd->callback([args, &exit_code] { exit_code = run_explain(*args); });
}

}  // namespace residue::cli
