// `residue train ROOT -o MODEL` and `residue audit ROOT`.
#include <algorithm>
#include <cstdio>
#include <iostream>
#include <map>
#include <memory>
#include <optional>

#include "calibration_run.hpp"
#include "commands.hpp"
#include "dataset_options.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/training/carried.hpp"
#include "residue/training/trainer.hpp"
#include "residue/training/verdicts.hpp"

namespace residue::cli {

namespace {

struct TrainArgs {
  DatasetArgs data;
  std::string output;
  bool strict = false;
  TrainSettings settings;
  std::string group_by = "duplicates";
  std::vector<std::string> only;
  std::string augment = "full";
  std::string instances = "image";
  std::string from;  // parent model whose settings are reused
  bool keep_c = false;
  std::vector<std::string> calibration;   // camera photos (and generated images) held out for the thresholds
  std::vector<std::string> given;         // options set on the command line (they win over --from)
  std::vector<std::string> more_records;  // further record files after ROOT
  std::string labels;                     // with records: a labelled folder or manifest
  std::string verdicts;                   // verdict store whose judged images join the data
};

struct AuditArgs {
  DatasetArgs data;
  bool strict = false;
  bool json = false;
};

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

bool given(const TrainArgs& args, const char* option) {
  return std::find(args.given.begin(), args.given.end(), option) != args.given.end();
}

// The command line's settings, or the parent's where an option was not given.
std::optional<TrainSettings> resolve_settings(const TrainArgs& args, const std::optional<Model>& parent) {
  TrainSettings s = args.settings;
  s.group_by = parse_group_by(args.group_by);
  s.feature_prefixes = args.only;
  s.augment = *parse_augment(args.augment);  // CLI checks the choice
  s.window_instances = args.instances == "windows";
  if (given(args, "--c-grid")) s.large_set = 0;  // the user's grid is used as given
  if (!parent) return s;
  TrainSettings p = settings_from_model(*parent);
  if (given(args, "--folds")) p.folds = s.folds;
  if (given(args, "--c-grid")) {
    p.c_grid = s.c_grid;
    p.large_set = 0;
  }
  if (given(args, "--target-fpr")) p.target_fpr = s.target_fpr;
  if (given(args, "--generated-miss")) p.generated_miss = s.generated_miss;
  if (given(args, "--group-by")) p.group_by = s.group_by;
  if (given(args, "--only")) p.feature_prefixes = s.feature_prefixes;
  if (given(args, "--augment")) p.augment = s.augment;
  if (given(args, "--instances")) p.window_instances = s.window_instances;
  if (given(args, "--camera-only")) p.camera_only = s.camera_only;
  if (args.keep_c) {
    const auto cv = parent->provenance.value("cross_validation", nlohmann::json::object());
    if (!cv.contains("chosen_c")) {
      std::cerr << "residue train: --keep-c: " << args.from << " does not record its chosen C\n";
      return std::nullopt;
    }
    p.c_grid = {cv["chosen_c"].get<double>()};
    p.large_set = 0;
  }
  std::cout << "Settings from " << parent->id << " (" << args.from
            << "), options given here win: " << settings_to_json(p).dump() << "\n\n";
  return p;
}

void print_lineage(const nlohmann::ordered_json& lineage) {
  std::cout << "Lineage: parent " << lineage["parent"].get<std::string>();
  if (lineage["added"].is_null()) {
    std::cout << "; " << lineage["note"].get<std::string>() << "\n\n";
    return;
  }
  const auto& added = lineage["added"];
  std::cout << "; added " << added["images"] << " images (" << added["camera"] << " camera, "
            << added["generated"] << " generated";
  for (const auto& [name, n] : added["per_generator"].items()) std::cout << "; " << name << ": " << n;
  std::cout << "), removed " << lineage["removed"]["images"] << ".";
  if (!added["new_generators"].empty())
    std::cout << " Generators new to the model: " << added["new_generators"].dump();
  std::cout << "\n\n";
}

// Adds the verdict store's judged images (with stored vectors) to the prepared items; images the
// data already holds (by content) keep their label from the data, and disagreements are said.
bool add_verdict_items(const std::string& path, PrepareReport& report, nlohmann::ordered_json& summary) {
  auto store = VerdictStore::open(path);
  if (!store) {
    std::cerr << "residue train: --verdicts: " << store.error().message << "\n";
    return false;
  }
  auto judged = verdict_items(**store);
  if (!judged) {
    std::cerr << "residue train: --verdicts: " << judged.error().message << "\n";
    return false;
  }
  std::map<std::string, Label> known;
  for (const auto& it : report.items) known.emplace(it.sha256, it.file.label);
  size_t added = 0;
  size_t already = 0;
  size_t disagree = 0;
  nlohmann::ordered_json per_generator = nlohmann::ordered_json::object();
  for (auto& it : judged->items) {
    if (const auto k = known.find(it.sha256); k != known.end()) {
      ++already;
      disagree += k->second != it.file.label;
      continue;
    }
    per_generator[it.file.generator] = per_generator.value(it.file.generator, 0) + 1;
    report.items.push_back(std::move(it));
    ++added;
  }
  std::cout << "Verdicts from " << path << ": " << judged->verdicts << " verdicts, " << added
            << " judged images added";
  for (const auto& [name, n] : per_generator.items()) std::cout << "; " << name << ": " << n;
  if (already > 0) {
    std::cout << "; " << already << " already in the data (their label there is kept";
    if (disagree > 0) std::cout << "; " << disagree << " of them judged otherwise by a reviewer: check them";
    std::cout << ")";
  }
  std::cout << "\n";
  for (const auto& note : judged->notes) std::cout << "  " << note << "\n";
  std::cout << "\n";
  summary = {{"file", path},
             {"verdicts", judged->verdicts},
             {"images_added", added},
             {"per_generator", per_generator},
             {"already_in_data", already},
             {"disagreeing_with_data", disagree},
             {"conflicts_left_out", judged->conflicts},
             {"without_vector", judged->without_vector},
             {"other_extractor", judged->other_extractor}};
  return true;
}

// What the camera-only score did out of fold beside the two-class score (provenance "camera_only").
void print_camera_only_summary(const Model& model) {
  const auto& c = model.provenance.value("camera_only", nlohmann::ordered_json::object());
  if (!c.contains("alone")) return;
  const auto& alone = c["alone"]["overall"];
  const auto& lc = c["likely_camera_out_of_fold"];
  std::printf(
      "Camera-only score (fitted on camera photos alone, out of fold): ROC AUC %.3f, %.0f %% of generated "
      "images above 99 %% of camera photos.\n  Of the %d generated images the two-class score put in "
      "likely-camera, %d are unusual for a camera photo and are made inconclusive (so are %d of %d camera "
      "photos there).\n",
      alone.value("roc_auc", 0.0), 100.0 * alone.value("tpr_at_fpr_1pct", 0.0), lc.value("generated", 0),
      lc.value("generated_unusual", 0), lc.value("camera_unusual", 0), lc.value("camera", 0));
}

int finish_camera_only(const Model& model, const CrossValidation& cv, const std::string& output) {
  const auto& c = model.provenance["camera_only"];
  std::cout << "Camera-only model: grouped " << model.provenance["cross_validation"]["folds"].get<int>()
            << "-fold cross-validation over " << cv.groups
            << " groups of camera photos; each fold scored by a "
            << "density fitted without it.\n";
  std::printf(
      "  Camera-only score of the camera photos, out of fold: median %.3f, robust spread %.3f; %d are "
      "unusual (conformal p-value <= %s).\n",
      c.value("median_score", 0.0), c.value("score_spread", 0.0), c.value("camera_unusual_out_of_fold", 0),
      percent_text(model.camera_only->unusual).c_str());
  std::cout << calibration_summary(model);
  std::cout << "  " << c["note"].get<std::string>() << "\n";
  if (auto saved = save_model(model, output); !saved) {
    std::cerr << "residue train: " << saved.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::cout << "\nModel " << model.id << " written to " << output << " (camera-only, "
            << model.features.size() << " features)\n\n"
            << kAdvisoryNotice << "\n";
  return 0;
}

int run_train(TrainArgs& args) {
  std::optional<Model> parent;
  if (!args.from.empty()) {
    auto loaded = load_model(args.from);
    if (!loaded) {
      std::cerr << "residue train: --from: " << loaded.error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    parent = std::move(*loaded);
  } else if (args.keep_c) {
    std::cerr << "residue train: --keep-c needs --from OLD\n";
    return static_cast<int>(ExitCode::kUsage);
  }
  // Settings first: a parent that cannot give them is refused before any image is read.
  auto settings = resolve_settings(args, parent);
  if (!settings) return static_cast<int>(ExitCode::kFailure);
  args.data.augment = settings->augment;
  const bool from_records = is_records_file(args.data.root);
  if (!from_records && (!args.more_records.empty() || !args.labels.empty())) {
    std::cerr << "residue train: further inputs and --labels are for training from records (JSON lines); "
              << args.data.root << " is a folder or manifest\n";
    return static_cast<int>(ExitCode::kUsage);
  }
  if (from_records && settings->window_instances) {
    std::cerr
        << "residue train: records carry no window vectors: --instances windows needs the image files\n";
    return static_cast<int>(ExitCode::kUsage);
  }
  std::optional<PreparedDataset> prepared;
  if (from_records) {
    std::vector<std::string> files = {args.data.root};
    files.insert(files.end(), args.more_records.begin(), args.more_records.end());
    prepared = prepare_from_records(files, args.labels, settings->augment, given(args, "--augment"), "train");
    if (prepared) settings->augment = prepared->augment;
  } else {
    prepared = prepare_from_args(args.data, "train");
  }
  if (!prepared) return static_cast<int>(ExitCode::kFailure);
  nlohmann::ordered_json from_verdicts;
  if (!args.verdicts.empty() && !add_verdict_items(args.verdicts, prepared->report, from_verdicts))
    return static_cast<int>(ExitCode::kFailure);
  const AuditReport audit = audit_dataset(prepared->report.items, prepared->report.failed.size());
  std::cout << "Audit of the training data\n" << audit_to_text(audit) << "\n";
  if (args.strict && !audit.warnings.empty()) {
    std::cerr << "residue train: refused because of the audit warnings above (--strict)\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  settings->jobs = prepared->jobs;
  const auto generated = static_cast<size_t>(
      std::count_if(prepared->report.items.begin(), prepared->report.items.end(),
                    [](const PreparedItem& it) { return it.file.label == Label::kGenerated; }));
  if (generated == 0 && !settings->camera_only) {
    std::cout << "No generated images: training a camera-only model (as --camera-only). It has seen no "
                 "generator.\n\n";
    settings->camera_only = true;
  } else if (generated > 0 && settings->camera_only && !args.settings.camera_only) {
    std::cout << "The parent model is camera-only; " << generated
              << " generated images are given now, so this trains a two-class model.\n\n";
    settings->camera_only = false;
  }
  auto outcome = train_model(prepared->report.items, *settings, audit, prepared->report.copies);
  if (!outcome) {
    std::cerr << "residue train: " << outcome.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  const auto& cv = outcome->cv;
  Model& model = outcome->model;
  model.provenance["preparation"] = {{"extracted", prepared->report.extracted},
                                     {"from_cache", prepared->report.cached},
                                     {"seconds", prepared->report.seconds},
                                     {"seconds_saved_by_cache", prepared->seconds_saved()},
                                     {"augmented_copies", prepared->report.copies.size()},
                                     {"copies_extracted", prepared->report.copies_extracted},
                                     {"copies_failed", prepared->report.copies_failed},
                                     {"from_records", from_records}};
  if (!from_verdicts.is_null()) model.provenance["verdicts"] = from_verdicts;
  if (!args.calibration.empty()) {
    CalibrationInputs in;
    in.roots = args.calibration;
    in.data = args.data;
    in.data.augment = kCalibrationAugment;
    in.group_by = settings->group_by;
    in.settings = {settings->target_fpr, settings->fpr_confidence, settings->generated_miss};
    std::cout << "Calibration on held-out images (" << args.calibration.size() << " root"
              << (args.calibration.size() == 1 ? "" : "s") << "):\n";
    if (!calibrate_from_roots(model, in, "train")) return static_cast<int>(ExitCode::kFailure);
  }
  if (parent) {
    model.provenance["lineage"] = lineage_of(*parent, prepared->report.items);
    print_lineage(model.provenance["lineage"]);
  }
  stamp_model_id(model);
  if (model.kind == "camera-only") return finish_camera_only(model, cv, args.output);
  std::cout << "Grouped " << model.provenance["cross_validation"]["folds"].get<int>()
            << "-fold cross-validation (" << cv.groups << " groups by " << args.group_by
            << "; a group never straddles a split)\n";
  for (size_t ci = 0; ci < cv.auc_by_c.size(); ++ci) {
    const auto& [c, auc] = cv.auc_by_c[ci];
    const SolverUse& solver = cv.solver_by_c[ci];
    std::printf("  C = %-7g out-of-fold ROC AUC %.3f  (solver: %d passes at most%s)%s\n", c, auc,
                solver.passes, solver.converged ? "" : ", stopped at the pass limit",
                c == cv.chosen_c ? "   <- chosen" : "");
  }
  if (!cv.final_solver.converged) {
    std::cout
        << "  The final fit stopped at the solver's pass limit before meeting its tolerance: the model is "
           "usable but not fully converged.\n";
  }
  if (model.instances == "windows") {
    std::cout << "Learned from every analysis window; an image's margin is the " << model.pooling
              << " of its windows' margins.\n";
  }
  std::cout << "\nOut-of-fold metrics (images scored by models that never saw them or their group):\n"
            << report_to_text(cv.report);
  std::printf("\nProbabilities: Platt sigmoid A = %.4f, B = %.4f; training base rate %.3f generated.\n",
              model.calibration.a, model.calibration.b, model.training_prior);
  std::cout << calibration_summary(model);
  if (model.thresholds.promise && !model.thresholds.promise->met) {
    std::cout
        << "  Camera photos the model never trained on raise what can be promised cheaply: residue calibrate "
           "MODEL ROOT -o NEW (docs/training.md, \"Calibration\").\n";
  }
  if (const auto& a = model.applicability) {
    size_t resampled = 0;
    for (const auto& [bin, count] : a->camera.resampling_bin) resampled += count;
    size_t jpegs = 0;
    for (const auto& [quality, count] : a->camera.jpeg_quality) jpegs += count;
    const std::string qualities =
        jpegs == 0 ? std::string()
                   : " (quality " + std::to_string(a->camera.jpeg_quality.begin()->first) + "-" +
                         std::to_string(a->camera.jpeg_quality.rbegin()->first) + ")";
    std::cout << "Applicability: images outside what " << static_cast<int>(100 * a->coverage)
              << " % of the training images showed (out of fold) are scored inconclusive; limits per family:";
    for (const auto& f : a->families) std::printf(" %s %.2f", f.family.c_str(), f.limit);
    std::cout << ".\n  Processing the training's camera photos showed (at least " << a->min_support
              << " needed to judge such an image): " << a->camera.quantised << " palette, "
              << a->camera.lossy_webp << " lossy WebP, " << jpegs << " JPEG" << qualities << ", " << resampled
              << " resampled, " << a->camera.screenshot_like << " screenshot-like.\n";
  }
  print_camera_only_summary(model);
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
                  "camera false-positive rate that likely-generated promises: the threshold is the lowest "
                  "whose upper 95 % Clopper-Pearson bound (out of fold, over images and over groups) is at "
                  "most this")
      ->check(CLI::Range(0.0001, 0.5))
      ->capture_default_str();
  cmd->add_option("--generated-miss", args->settings.generated_miss,
                  "share of generated images allowed in likely-camera (sets that threshold)")
      ->check(CLI::Range(0.0, 0.5))
      ->capture_default_str();
  add_group_by_option(*cmd, args->group_by, "what must stay on one side of a split");
  cmd->add_option("--only", args->only,
                  "use only features whose names start with these prefixes (e.g. spectral.); by default every "
                  "feature but the coding surprise's (surprise.), which the camera model reads instead (give "
                  "--only with surprise. among the prefixes to let the SVM learn from them)");
  cmd->add_option(
         "--augment", args->augment,
         "also train on processed copies of every image, both classes alike (drawn from each file's "
         "hash, cached): none; light = a JPEG (quality 65-95) and a downscale (0.5-0.9); full = those "
         "plus a lossy WebP (65-95) and a centre crop (0.5-0.9)")
      ->check(CLI::IsMember({"none", "light", "full"}))
      ->capture_default_str();
  cmd->add_option("--instances", args->instances,
                  "what the SVM learns from: image (one pooled vector per image) or windows (every analysis "
                  "window, margins pooled per image by the mean or the top third, chosen out of fold)")
      ->check(CLI::IsMember({"image", "windows"}))
      ->capture_default_str();
  cmd->add_option("--from", args->from,
                  "retrain from this model: reuse its settings (options given here win) and record it as "
                  "the parent, with what was added");
  cmd->add_option("--calibration", args->calibration,
                  "set the thresholds and camera tail on these held-out folders or manifests (camera photos "
                  "the training never sees; as `residue calibrate`) instead of the out-of-fold scores");
  cmd->add_option("records", args->more_records,
                  "when ROOT is a records file (JSON lines from scan or worker --with-features, or collect): "
                  "further records files");
  cmd->add_option("--labels", args->labels,
                  "with records: the labelled folder or CSV manifest that labels them (matched by path); "
                  "without it, each record's own label, generator and group members are used");
  cmd->add_option(
      "--verdicts", args->verdicts,
      "verdict store (residue verdict, serve --verdicts): its judged images with stored vectors join "
      "the training data, generated ones under their generator name or 'unnamed'; conflicts are "
      "left out");
  cmd->add_flag("--camera-only", args->settings.camera_only,
                "train on camera photos alone (what `train` also does when ROOT has no generated images): "
                "the model scores how unusual an image is for a camera photo, with thresholds from camera "
                "photos and no likely-camera band, for generators nobody has samples of yet");
  cmd->add_flag("--keep-c", args->keep_c,
                "with --from: keep the parent's chosen C instead of searching the grid again (faster)");
  cmd->footer("Exit status: 0 model written, 1 failure (or refused with --strict), 2 usage error.");
  cmd->callback([args, cmd, &exit_code] {
    for (const char* option : {"--folds", "--c-grid", "--target-fpr", "--generated-miss", "--group-by",
                               "--only", "--augment", "--instances", "--camera-only"}) {
      if (cmd->count(option) > 0) args->given.emplace_back(option);
    }
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
