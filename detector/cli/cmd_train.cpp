// `residue train ROOT -o MODEL` and `residue audit ROOT`.
#include <cstdio>
#include <iostream>
#include <memory>

#include "commands.hpp"
#include "dataset_options.hpp"
#include "residue/detector/record.hpp"
#include "residue/training/trainer.hpp"

namespace residue::cli {

namespace {

struct TrainArgs {
  DatasetArgs data;
  std::string output;
  bool strict = false;
  TrainSettings settings;
  std::string group_by = "duplicates";
  std::vector<std::string> only;
  bool c_grid_given = false;
};

struct AuditArgs {
  DatasetArgs data;
  bool strict = false;
  bool json = false;
};

GroupBy parse_group_by(const std::string& s) {
  if (s == "folder") return GroupBy::kFolder;
  if (s == "manifest") return GroupBy::kManifest;
  return GroupBy::kDuplicates;
}

int run_audit(const AuditArgs& args) {
  auto prepared = prepare_from_args(args.data, "audit");
  if (!prepared) return static_cast<int>(ExitCode::kFailure);
  const AuditReport audit = audit_dataset(prepared->report.items, prepared->report.failed.size());
  if (args.json) {
    std::cout << audit_to_json(audit).dump(2) << "\n";
  } else {
    std::cout << audit_to_text(audit);
  }
  return args.strict && !audit.warnings.empty() ? static_cast<int>(ExitCode::kFailure) : 0;
}

int run_train(TrainArgs& args) {
  auto prepared = prepare_from_args(args.data, "train");
  if (!prepared) return static_cast<int>(ExitCode::kFailure);
  const AuditReport audit = audit_dataset(prepared->report.items, prepared->report.failed.size());
  std::cout << "Audit of the training data\n" << audit_to_text(audit) << "\n";
  if (args.strict && !audit.warnings.empty()) {
    std::cerr << "residue train: refused because of the audit warnings above (--strict)\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  args.settings.group_by = parse_group_by(args.group_by);
  args.settings.feature_prefixes = args.only;
  if (args.c_grid_given) args.settings.large_set = 0;  // the user's grid is used as given
  auto outcome = train_model(prepared->report.items, args.settings, audit);
  if (!outcome) {
    std::cerr << "residue train: " << outcome.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  const auto& cv = outcome->cv;
  const Model& model = outcome->model;
  std::cout << "Grouped " << model.provenance["cross_validation"]["folds"].get<int>()
            << "-fold cross-validation (" << cv.groups << " groups by " << args.group_by
            << "; a group never straddles a split)\n";
  for (const auto& [c, auc] : cv.auc_by_c) {
    std::printf("  C = %-7g out-of-fold ROC AUC %.3f%s\n", c, auc, c == cv.chosen_c ? "   <- chosen" : "");
  }
  std::cout << "\nOut-of-fold metrics (images scored by models that never saw them or their group):\n"
            << report_to_text(cv.report);
  std::printf(
      "\nCalibration: Platt sigmoid A = %.4f, B = %.4f; training base rate %.3f generated.\n"
      "Bands: likely-generated at P >= %.3f (%.1f %% camera false positives out of fold), likely-camera "
      "below %.3f.\n",
      model.calibration.a, model.calibration.b, model.training_prior, model.thresholds.likely_generated,
      100 * model.thresholds.target_fpr, model.thresholds.likely_camera);
  if (auto saved = save_model(model, args.output); !saved) {
    std::cerr << "residue train: " << saved.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::cout << "\nModel " << model.id << " written to " << args.output << " (" << model.features.size()
            << " features, C = " << cv.chosen_c << ")\n\n"
            << kAdvisoryNotice << "\n";
  return 0;
}

}  // namespace

void add_train_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<TrainArgs>();
  auto* cmd = app.add_subcommand(
      "train", "Train a model on labelled folders (ROOT/camera, ROOT/generated/<generator>)");
  add_dataset_options(*cmd, args->data,
                      "labelled folder ROOT, or a CSV manifest (path,label[,generator[,group]])");
  cmd->add_option("-o,--output", args->output, "model file to write (JSON, written atomically)")->required();
  cmd->add_flag("--strict", args->strict, "refuse to train when the audit warns of a confound");
  cmd->add_option("--folds", args->settings.folds, "cross-validation folds")
      ->check(CLI::Range(2, 20))
      ->capture_default_str();
  cmd->add_option("--c-grid", args->settings.c_grid, "SVM C values tried by cross-validation")
      ->capture_default_str();
  cmd->add_option("--target-fpr", args->settings.target_fpr,
                  "share of camera images allowed in likely-generated (sets that threshold)")
      ->check(CLI::Range(0.0001, 0.5))
      ->capture_default_str();
  cmd->add_option("--generated-miss", args->settings.generated_miss,
                  "share of generated images allowed in likely-camera (sets that threshold)")
      ->check(CLI::Range(0.0, 0.5))
      ->capture_default_str();
  cmd->add_option(
         "--group-by", args->group_by,
         "what must stay on one side of a split: duplicates, folder (+duplicates), manifest (+duplicates)")
      ->check(CLI::IsMember({"duplicates", "folder", "manifest"}))
      ->capture_default_str();
  cmd->add_option("--only", args->only,
                  "use only features whose names start with these prefixes (e.g. spectral.)");
  cmd->footer("Exit status: 0 model written, 1 failure (or refused with --strict), 2 usage error.");
  cmd->callback([args, cmd, &exit_code] {
    args->c_grid_given = cmd->count("--c-grid") > 0;
    exit_code = run_train(*args);
  });
}

void add_audit_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<AuditArgs>();
  auto* cmd =
      app.add_subcommand("audit", "Compare the classes of a labelled folder for confounds before training");
  add_dataset_options(*cmd, args->data, "labelled folder ROOT, or a CSV manifest");
  cmd->add_flag("--strict", args->strict, "exit 1 when there is any warning");
  cmd->add_flag("--json", args->json, "print the audit as JSON");
  cmd->footer("Exit status: 0 done, 1 failure or a warning under --strict, 2 usage error.");
  cmd->callback([args, &exit_code] { exit_code = run_audit(*args); });
}

}  // namespace residue::cli
