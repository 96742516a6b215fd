// `residue evaluate MODEL ROOT`: metrics of a model on labelled folders it did not see.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <iostream>
#include <map>
#include <memory>
#include <optional>

#include "commands.hpp"
#include "dataset_options.hpp"
#include "progress.hpp"
#include "residue/detector/pages/evaluation_page.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/features/transforms.hpp"
#include "residue/training/atomic_file.hpp"
#include "residue/training/evaluation.hpp"
#include "residue/training/model.hpp"
#include "residue/training/robustness.hpp"

namespace residue::cli {

namespace {

struct EvaluateArgs {
  std::string model_path;
  DatasetArgs data;
  bool json = false;
  std::string html;
  std::optional<double> prior;
  bool processing = false;
  std::vector<std::string> transforms;
};

std::vector<std::string> chosen_transforms(const EvaluateArgs& args) {
  if (!args.transforms.empty()) return args.transforms;
  std::vector<std::string> all;
  for (const auto& t : processing_transforms()) all.push_back(t.name);
  return all;
}

int run_evaluate(const EvaluateArgs& args) {
  for (const auto& name : args.transforms) {
    const auto all = processing_transforms();
    if (std::none_of(all.begin(), all.end(), [&](const TransformInfo& t) { return t.name == name; })) {
      std::cerr << "residue evaluate: unknown transform '" << name << "'; known:";
      for (const auto& t : all) std::cerr << " " << t.name;
      std::cerr << "\n";
      return static_cast<int>(ExitCode::kUsage);
    }
  }
  auto model = load_model(args.model_path);
  if (!model) {
    std::cerr << "residue evaluate: " << model.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  auto prepared = prepare_from_args(args.data, "evaluate");
  if (!prepared) return static_cast<int>(ExitCode::kFailure);
  std::vector<double> p;
  std::vector<int> labels;
  std::vector<std::string> generators;
  // Bands as a scan gives them (the guards see each file's processing evidence), per class.
  std::map<std::string, std::map<std::string, size_t>> bands;
  for (const auto& item : prepared->report.items) {
    const Score s = score(*model, item.features, args.prior, &item.facts.processing);
    ++bands[item.file.label == Label::kGenerated ? "generated" : "camera"][s.band];
    p.push_back(s.p_generated);
    labels.push_back(item.file.label == Label::kGenerated ? 1 : 0);
    generators.push_back(item.file.generator);
  }
  const EvaluationReport report = evaluate_scores(p, labels, generators, model->thresholds.likely_generated);
  std::vector<ProcessingRow> processing;
  if (args.processing) {
    const Progress bar("processed images");
    processing = evaluate_processing(prepared->dataset, *model, chosen_transforms(args), args.data.extract,
                                     prepared->jobs, args.prior,
                                     [&bar](size_t done, size_t total) { bar.update(done, total); });
  }
  if (args.json) {
    nlohmann::ordered_json j = {{"model", model->id}, {"data", args.data.root}};
    j["metrics"] = report_to_json(report);
    j["threshold_promise"] = promise_text(model->thresholds);
    j["bands"] = bands;
    if (args.processing) j["processing"] = processing_rows_to_json(processing);
    j["advisory"] = kAdvisoryNotice;
    std::cout << j.dump(2) << "\n";
  } else {
    std::cout << "Model " << model->id << " on " << args.data.root << "\n"
              << report_to_text(report) << "\n"
              << "Likely-generated threshold " << model->thresholds.likely_generated << ": "
              << promise_text(model->thresholds) << ".\n";
    for (const char* cls : {"camera", "generated"}) {
      auto& b = bands[cls];
      const size_t total = b["likely-generated"] + b["inconclusive"] + b["likely-camera"];
      if (total == 0) continue;
      std::printf(
          "Bands as scanned, %s images (%zu): %zu likely-generated, %zu inconclusive, %zu likely-camera.\n",
          cls, total, b["likely-generated"], b["inconclusive"], b["likely-camera"]);
    }
    if (args.processing) {
      std::cout << "\nEveryday processing and laundering (each image processed, then scanned as an upload "
                   "would be):\n"
                << processing_rows_to_text(processing)
                << "Inconclusive counts every abstention: outside the training domain, processing the "
                   "training data never showed, a damaged file, too little fine detail left to judge, or a "
                   "score between the thresholds. Generated images in likely-camera are fakes the band "
                   "waved through (it promises at most "
                << static_cast<int>(std::lround(100 * model->thresholds.generated_miss)) << " %).\n";
    }
    std::cout << "\n" << kAdvisoryNotice << "\n";
  }
  if (!args.html.empty()) {
    const std::string page =
        evaluation_page(report, *model, "residue evaluation", "evaluated on " + args.data.root);
    if (auto w = write_file_atomically(args.html, page); !w) {
      std::cerr << "residue evaluate: " << w.error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    std::cerr << "residue evaluate: page written to " << args.html << "\n";
  }
  return 0;
}

}  // namespace

void add_evaluate_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<EvaluateArgs>();
  auto* cmd =
      app.add_subcommand("evaluate", "Measure a model on labelled folders (ideally images it never saw)");
  cmd->add_option("model", args->model_path, "model file from residue train")->required();
  add_dataset_options(*cmd, args->data, "labelled folder ROOT, or a CSV manifest");
  cmd->add_flag("--json", args->json, "print the metrics as JSON");
  cmd->add_option("--html", args->html, "also write a page with the ROC curve and reliability diagram");
  cmd->add_option("--prior", args->prior,
                  "shift probabilities to this share of generated images (deployment base rate) before "
                  "measuring; see docs/training.md")
      ->check(CLI::Range(0.0001, 0.9999));
  cmd->add_flag("--processing", args->processing,
                "also process every image with everyday transforms (JPEG q95/75/50, lossy WebP, downscale, "
                "upscale, palette PNG, sharpening, centre crop, screenshot-like rescale) and report, per "
                "transform, camera photos put in likely-generated, inconclusive shares, generated images "
                "still caught and AUC");
  cmd->add_option("--transforms", args->transforms,
                  "with --processing: only these transforms (default: all; names as in the table)")
      ->delimiter(',');
  cmd->footer("Exit status: 0 done, 1 failure, 2 usage error.");
  cmd->callback([args, &exit_code] { exit_code = run_evaluate(*args); });
}

}  // namespace residue::cli
