// `residue compare OLD NEW ROOT`: both models on the same labelled images, with a bootstrap noise
// margin per row and an exit status that can gate promoting NEW.
#include <iostream>
#include <memory>
#include <optional>
#include <set>

#include "calibration_run.hpp"
#include "commands.hpp"
#include "dataset_options.hpp"
#include "residue/detector/pages/comparison_page.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/training/atomic_file.hpp"
#include "residue/training/comparison.hpp"
#include "residue/training/model.hpp"
#include "residue/training/trainer.hpp"
#include "residue/training/verdicts.hpp"

namespace residue::cli {

namespace {

struct CompareArgs {
  std::string old_path, new_path;
  DatasetArgs data;
  CompareSettings settings;
  bool json = false;
  std::string html;
  std::optional<double> prior;
  std::string group_by = "duplicates";
  std::string verdicts;
};

std::set<std::string> generators_seen(const Model& model) {
  std::set<std::string> seen;
  const auto counts = model.provenance.value("counts", nlohmann::json::object());
  const auto per_generator = counts.value("per_generator", nlohmann::json::object());
  for (const auto& [name, n] : per_generator.items()) seen.insert(name);
  return seen;
}

// Comparison images that were among a model's training files flatter that model.
size_t training_overlap(const Model& model, const std::vector<PreparedItem>& items) {
  const auto listed = model.provenance.value("training_files", nlohmann::json::array());
  std::set<std::string> files;
  for (const auto& h : listed) files.insert(h.get<std::string>());
  size_t n = 0;
  for (const auto& it : items) n += files.count(training_file_key(it.sha256));
  return n;
}

std::vector<std::string> notes_for(const Model& old_model, const Model& new_model,
                                   const std::vector<PreparedItem>& items, const Comparison& c) {
  std::vector<std::string> notes;
  const auto old_seen = generators_seen(old_model);
  const auto new_seen = generators_seen(new_model);
  for (const auto& row : c.rows) {
    if (row.name == "camera" || row.name == "all") continue;
    const bool o = old_seen.contains(row.name), n = new_seen.contains(row.name);
    if (!o || !n) {
      notes.push_back("Generator '" + row.name + "' was " + (o ? "" : "not ") +
                      "in OLD's training data and " + (n ? "" : "not ") + "in NEW's.");
    }
  }
  for (const auto* m : {&old_model, &new_model}) {
    const size_t overlap = training_overlap(*m, items);
    if (overlap > 0) {
      notes.push_back(std::to_string(overlap) + " of the " + std::to_string(items.size()) +
                      " comparison images were in the training data of " + (m == &old_model ? "OLD" : "NEW") +
                      " (" + m->id + "): the comparison flatters that model. Compare on held-back images.");
    }
  }
  if (old_model.thresholds.target_fpr != new_model.thresholds.target_fpr) {
    notes.emplace_back(
        "The models' thresholds were chosen for different false-positive targets; FPR and TPR rows "
        "compare different operating points.");
  }
  return notes;
}

int run_compare(const CompareArgs& args) {
  auto old_model = load_model(args.old_path);
  auto new_model = load_model(args.new_path);
  for (const auto* m : {&old_model, &new_model}) {
    if (!*m) {
      std::cerr << "residue compare: " << m->error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
  }
  auto prepared = prepare_from_args(args.data, "compare");
  if (!prepared) return static_cast<int>(ExitCode::kFailure);
  const auto& items = prepared->report.items;
  std::vector<int> labels;
  std::vector<std::string> generators;
  ModelScores old_scores{old_model->id, {}, old_model->thresholds.likely_generated};
  ModelScores new_scores{new_model->id, {}, new_model->thresholds.likely_generated};
  for (const auto& item : items) {
    labels.push_back(item.file.label == Label::kGenerated ? 1 : 0);
    generators.push_back(item.file.generator);
    old_scores.p.push_back(score(*old_model, item.features, args.prior).p_generated);
    new_scores.p.push_back(score(*new_model, item.features, args.prior).p_generated);
  }
  const auto positives = static_cast<size_t>(std::count(labels.begin(), labels.end(), 1));
  if (positives == 0 || positives == labels.size()) {
    std::cerr << "residue compare: " << args.data.root
              << " needs both camera and generated images (ROOT/camera, ROOT/generated/<generator>)\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  const Comparison c = compare_models(labels, generators, old_scores, new_scores, args.settings,
                                      assign_groups(items, parse_group_by(args.group_by)));
  auto notes = notes_for(*old_model, *new_model, items, c);
  // Reviewers' verdicts: what each model was trained and calibrated on, and how its bands agreed.
  nlohmann::ordered_json verdicts_json = nlohmann::ordered_json::object();
  std::string verdicts_text = "\nVerdicts: OLD " + verdicts_used_text(*old_model) + ".\n          NEW " +
                              verdicts_used_text(*new_model) + ".\n";
  if (!args.verdicts.empty()) {
    auto store = VerdictStore::open(args.verdicts);
    auto judged = store ? verdict_items(**store) : Result<VerdictItems>(store.error());
    if (!judged) {
      std::cerr << "residue compare: --verdicts: " << judged.error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    verdicts_json["file"] = args.verdicts;
    verdicts_json["verdicts"] = judged->verdicts;
    for (const auto& [key, m] : {std::pair{"old", &*old_model}, std::pair{"new", &*new_model}}) {
      const VerdictAgreement a = agreement_of(*m, judged->items);
      verdicts_json[key] = agreement_to_json(a);
      verdicts_text += std::string("Bands of ") + (std::string(key) == "old" ? "OLD" : "NEW") + " on the " +
                       std::to_string(a.images) + " judged images of " + args.verdicts + ":\n" +
                       agreement_to_text(a);
      notes.push_back(std::string(std::string(key) == "old" ? "OLD" : "NEW") + " on " +
                      std::to_string(a.images) + " judged images of " + args.verdicts + ": " +
                      std::to_string(a.count("camera", "likely-generated")) +
                      " judged camera photos in likely-generated, " +
                      std::to_string(a.count("generated", "likely-camera")) +
                      " judged generated images in likely-camera, " +
                      std::to_string(a.count("generated", "likely-generated")) + " of " +
                      std::to_string(a.count("generated", "likely-camera") +
                                     a.count("generated", "inconclusive") +
                                     a.count("generated", "likely-generated")) +
                      " judged generated images caught.");
    }
    for (const auto& n : judged->notes) verdicts_text += "  " + n + "\n";
  }
  verdicts_json["old_used"] = verdicts_used_text(*old_model);
  verdicts_json["new_used"] = verdicts_used_text(*new_model);
  if (args.json) {
    nlohmann::ordered_json j = comparison_to_json(c);
    j["data"] = args.data.root;
    j["noise_margin"]["grouped_by"] = args.group_by;
    j["notes"] = notes;
    for (const auto& [key, m] : {std::pair{"old", &*old_model}, std::pair{"new", &*new_model}}) {
      j["calibration"][key] = m->calibration_set
                                  ? nlohmann::ordered_json(calibration_record_to_json(*m->calibration_set))
                                  : nlohmann::ordered_json(nullptr);
      j["calibration"][key]["promise"] = promise_text(m->thresholds);
    }
    j["verdicts"] = verdicts_json;
    j["advisory"] = kAdvisoryNotice;
    std::cout << j.dump(2) << "\n";
  } else {
    std::cout << comparison_to_text(c);
    std::cout << "\nOLD " << calibration_summary(*old_model) << "NEW " << calibration_summary(*new_model);
    std::cout << verdicts_text;
    for (const auto& n : notes) std::cout << "Note: " << n << "\n";
    std::cout << "\n" << kAdvisoryNotice << "\n";
  }
  if (!args.html.empty()) {
    const std::string description = "measured on " + std::to_string(items.size()) + " images of " +
                                    args.data.root + "; bootstrap units grouped by " + args.group_by;
    if (auto w = write_file_atomically(args.html, comparison_page(c, description, notes)); !w) {
      std::cerr << "residue compare: " << w.error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    std::cerr << "residue compare: page written to " << args.html << "\n";
  }
  return c.new_no_worse ? 0 : static_cast<int>(ExitCode::kCheckFailed);
}

}  // namespace

void add_compare_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<CompareArgs>();
  auto* cmd = app.add_subcommand(
      "compare",
      "Compare two models on labelled images, per generator and on camera images, to gate promotion");
  cmd->add_option("old", args->old_path, "the model in use")->required();
  cmd->add_option("new", args->new_path, "the candidate model")->required();
  add_dataset_options(*cmd, args->data,
                      "labelled folder ROOT (ideally held back from both models' training)");
  cmd->add_flag("--json", args->json, "print the comparison as JSON");
  cmd->add_option(
      "--verdicts", args->verdicts,
      "verdict store: also show how each model's bands agreed with the reviewers' verdicts (judged "
      "images a model trained on are left out of its table)");
  cmd->add_option("--html", args->html, "also write the comparison as a page");
  cmd->add_option("--resamples", args->settings.resamples, "bootstrap resamples for the noise margin")
      ->check(CLI::Range(100, 100000))
      ->capture_default_str();
  cmd->add_option("--confidence", args->settings.confidence, "confidence of the bootstrap interval")
      ->check(CLI::Range(0.5, 0.999))
      ->capture_default_str();
  cmd->add_option("--tolerance", args->settings.tolerance,
                  "changes smaller than this never count as better or worse (on top of the interval)")
      ->check(CLI::Range(0.0, 0.5))
      ->capture_default_str();
  cmd->add_option("--seed", args->settings.seed, "bootstrap random seed")->capture_default_str();
  add_group_by_option(*cmd, args->group_by, "what the bootstrap draws whole");
  cmd->add_option("--min-units", args->settings.min_units,
                  "rows with fewer bootstrap units (groups) than this are 'too few' and not judged")
      ->check(CLI::Range(1, 1000))
      ->capture_default_str();
  cmd->add_option("--prior", args->prior,
                  "shift both models' probabilities to this share of generated images")
      ->check(CLI::Range(0.0001, 0.9999));
  cmd->footer(
      "Exit status: 0 NEW is no worse than OLD on every row, 4 NEW is worse on at least one row, 1 failure, "
      "2 usage error.");
  cmd->callback([args, &exit_code] { exit_code = run_compare(*args); });
}

}  // namespace residue::cli
