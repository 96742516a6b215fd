// `residue demo`: feature extraction over open sample photographs from a Debian package.
// (Grows into the full contest-screening scenario once training and scanning exist.)
#include <cstdio>
#include <filesystem>
#include <iostream>
#include <memory>

#include "commands.hpp"
#include "residue/detector/record.hpp"
#include "residue/detector/sample_images.hpp"
#include "residue/training/atomic_file.hpp"
#include "residue/training/batch.hpp"

namespace residue::cli {

namespace {

struct DemoArgs {
  std::string output_dir = "residue-demo";
};

double value_of(const Extraction& e, const std::string& name) {
  const auto& names = feature_names();
  for (size_t i = 0; i < names.size(); ++i) {
    if (names[i] == name) return e.features.values[i];
  }
  return 0.0;
}

int run_demo(const DemoArgs& args) {
  namespace fs = std::filesystem;
  const auto dir = sample_photo_dir();
  if (!dir) {
    std::cerr << "residue demo: scikit-image's sample photographs were not found; install python3-skimage "
                 "(scripts/setup.sh does) or set RESIDUE_SAMPLE_DIR\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::vector<std::string> paths;
  for (const auto& p : sample_photos(*dir)) paths.push_back(p.string());
  fs::create_directories(args.output_dir);
  const fs::path jsonl = fs::path(args.output_dir) / "features.jsonl";

  std::cout << "residue demo: trace features of " << paths.size()
            << " open photographs (scikit-image samples, " << dir->string() << ")\n\n";
  std::printf("%-22s %5s %-11s %-9s %8s %8s %8s %8s %6s\n", "file", "fmt", "size", "windows", "noise sd",
              "cfa g", "grid n2", "pmap pk", "jpeg q");
  std::string lines;
  int failed = 0;
  extract_batch(paths, {}, 2, [&](size_t, const std::string& path, const Result<Extraction>& r) {
    const std::string name = fs::path(path).filename().string();
    if (!r) {
      ++failed;
      lines += error_record(path, r.error()).dump() + "\n";
      std::printf("%-22s error %s: %s\n", name.c_str(), std::string(error_code_name(r.error().code)).c_str(),
                  r.error().message.c_str());
      return;
    }
    lines += features_record(path, *r).dump() + "\n";
    const std::string size = std::to_string(r->header.width) + "x" + std::to_string(r->header.height);
    const std::string windows =
        std::to_string(r->layout.origins.size()) + "x" + std::to_string(r->layout.size);
    const std::string quality = r->compression.jpeg ? std::to_string(r->compression.jpeg->quality) : "-";
    std::printf("%-22s %5s %-11s %-9s %8.2f %8.3f %8.3f %8.3f %6s\n", name.c_str(),
                std::string(image_format_name(r->header.format)).c_str(), size.c_str(), windows.c_str(),
                value_of(*r, "noise.level.immerkaer_sigma"), value_of(*r, "noise.cfa.lattice_contrast_g"),
                value_of(*r, "spectral.grid_n2.axis.peak.max"),
                value_of(*r, "resampling.pmap.projected.peak.max"), quality.c_str());
  });
  if (auto written = write_file_atomically(jsonl, lines); !written) {
    std::cerr << "residue demo: " << written.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::cout
      << "\nnoise sd: Immerkaer noise estimate (0..255 units); cfa g: 2x2 lattice contrast of the green\n"
         "residual (log10; high after demosaicing); grid n2: log10 peak-to-background at N/2 (high after\n"
         "2x upsampling); pmap pk: log10 resampling peak (Kirchner 2008). All "
      << feature_names().size() << " values per image: " << jsonl.string() << "\n\n"
      << kAdvisoryNotice << "\n";
  return failed > 0 ? static_cast<int>(ExitCode::kSomeInputsFailed) : 0;
}

}  // namespace

void add_demo_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<DemoArgs>();
  auto* cmd = app.add_subcommand("demo", "Run the built-in demonstration on open sample photographs");
  cmd->add_option("-o,--output-dir", args->output_dir, "folder for the demo's outputs")
      ->capture_default_str();
  cmd->callback([args, &exit_code] { exit_code = run_demo(*args); });
}

}  // namespace residue::cli
