// `residue calibrate MODEL ROOT... -o NEW`: thresholds and camera tail set on camera photos (and,
// optionally, generated images) the model never trained on (docs/training.md, "Calibration").
#include <iostream>
#include <memory>

#include "calibration_run.hpp"
#include "commands.hpp"
#include "options.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/training/trainer.hpp"

namespace residue::cli {

namespace {

struct CalibrateArgs {
  std::string model_path;
  std::string output;
  CalibrationInputs inputs;
  std::string group_by = "duplicates";
  std::string augment = augment_name(kCalibrationAugment);
  std::optional<double> target_fpr;
  std::optional<double> generated_miss;
};

int run_calibrate(CalibrateArgs& args) {
  auto model = load_model(args.model_path);
  if (!model) {
    std::cerr << "residue calibrate: " << model.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  const TrainSettings trained = settings_from_model(*model);
  CalibrationInputs& in = args.inputs;
  in.group_by = parse_group_by(args.group_by);
  in.data.augment = *parse_augment(args.augment);  // CLI checks the choice
  in.settings.target_fpr = args.target_fpr.value_or(trained.target_fpr);
  in.settings.generated_miss = args.generated_miss.value_or(trained.generated_miss);
  in.settings.confidence = trained.fpr_confidence;
  const std::string old_id = model->id;
  if (!calibrate_from_roots(*model, in, "calibrate")) return static_cast<int>(ExitCode::kFailure);
  std::cout << calibration_summary(*model);
  if (auto saved = save_model(*model, args.output); !saved) {
    std::cerr << "residue calibrate: " << saved.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::cout << "\nModel " << model->id << " (recalibrated from " << old_id << ") written to " << args.output
            << "\n\n"
            << kAdvisoryNotice << "\n";
  return 0;
}

}  // namespace

void add_calibrate_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<CalibrateArgs>();
  auto* cmd = app.add_subcommand(
      "calibrate",
      "Set a model's thresholds and camera tail on camera photos it never trained on (split-conformal)");
  cmd->add_option("model", args->model_path, "model file from residue train")->required();
  cmd->add_option("roots", args->inputs.roots,
                  "labelled folders (ROOT/camera/**, optionally ROOT/generated/<generator>/** for the "
                  "likely-camera threshold) or CSV manifests (path,label[,generator[,group]])");
  cmd->add_option("--verdicts", args->inputs.verdicts,
                  "verdict store (residue verdict, serve --verdicts): its judged images with stored vectors "
                  "join the calibration images (camera verdicts for the likely-generated threshold and the "
                  "camera tail, generated ones for likely-camera); conflicts are left out");
  cmd->add_option("-o,--output", args->output, "recalibrated model file to write (atomically)")->required();
  cmd->add_option("--cache", args->inputs.data.cache_path,
                  "feature cache file (SQLite; default " + default_cache_path() + ")");
  cmd->add_flag("--no-cache", args->inputs.data.no_cache, "extract every file again and store nothing");
  cmd->add_option("-j,--jobs", args->inputs.data.jobs, "threads for extraction (default: cores)")
      ->check(CLI::Range(1, 256));
  add_extract_options(*cmd, args->inputs.data.extract);
  add_group_by_option(*cmd, args->group_by, "what counts as one independent photo in the group bound");
  cmd->add_option("--target-fpr", args->target_fpr,
                  "camera false-positive rate that likely-generated promises (default: the model's): the "
                  "threshold is the lowest whose upper Clopper-Pearson bound over these images and over "
                  "their groups is at most this")
      ->check(CLI::Range(0.0001, 0.5));
  cmd->add_option("--generated-miss", args->generated_miss,
                  "share of generated calibration images allowed in likely-camera (default: the model's)")
      ->check(CLI::Range(0.0, 0.5));
  cmd->add_option(
         "--augment", args->augment,
         "processed copies of every calibration image counted in the threshold (a photo counts as "
         "flagged when it or any copy is; copies never enter the camera tail): full (JPEG, downscale, "
         "WebP, crop: the promise then covers everyday processing), light, or none (when the "
         "photos are the queue's own uploads, processing included; docs/training.md)")
      ->check(CLI::IsMember({"none", "light", "full"}))
      ->capture_default_str();
  cmd->footer("Exit status: 0 model written, 1 failure (too few camera photos among them), 2 usage error.");
  cmd->callback([args, &exit_code] {
    if (args->inputs.roots.empty() && args->inputs.verdicts.empty()) {
      std::cerr << "residue calibrate: give calibration folders or manifests, --verdicts FILE, or both\n";
      exit_code = static_cast<int>(ExitCode::kUsage);
      return;
    }
    exit_code = run_calibrate(*args);
  });
}

}  // namespace residue::cli
