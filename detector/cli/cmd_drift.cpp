// `residue drift MODEL SCAN.jsonl...`: has a recent batch of scan records moved away from the
// model's training data? PSI per feature family and for the score, inconclusive share, declared-
// generated images missed; a plain-words verdict and an exit status for a scheduled check.
#include <fstream>
#include <iostream>
#include <memory>
#include <optional>
#include <set>

#include "calibration_run.hpp"
#include "commands.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/training/drift.hpp"
#include "residue/training/model.hpp"

namespace residue::cli {

namespace {

struct DriftArgs {
  std::string model_path;
  std::vector<std::string> inputs;
  std::optional<double> prior;
  bool json = false;
};

struct Batch {
  std::vector<ScoredImage> images;
  std::set<double> priors;  // deployment priors the records were scored with (none: unshifted)
  size_t errors = 0, other_model = 0, malformed = 0, without_distance = 0;
};

std::map<std::string, double> number_map(const nlohmann::json& j) {
  std::map<std::string, double> out;
  if (!j.is_object()) return out;
  for (const auto& [k, v] : j.items()) {
    if (v.is_number()) out[k] = v.get<double>();
  }
  return out;
}

// One record into the batch; the band is recomputed at the model's own thresholds without a prior
// shift, so records scored with --prior or --threshold overrides count like the training data.
void add_record(const nlohmann::json& r, const Model& model, Batch& batch) {
  if (!r.is_object() || !r.contains("path")) {
    ++batch.malformed;
    return;
  }
  if (r.contains("error")) {
    ++batch.errors;
    return;
  }
  if (r.value("model", std::string()) != model.id) {
    ++batch.other_model;
    return;
  }
  if (!r.contains("margin") || !r["margin"].is_number()) {
    ++batch.malformed;
    return;
  }
  ScoredImage s;
  s.margin = r["margin"].get<double>();
  s.band = band_of(model.thresholds, model.calibration.probability(s.margin));
  s.contribution = number_map(r.value("contributions", nlohmann::json::object()));
  s.distance = number_map(r.value("family_distance", nlohmann::json::object()));
  if (s.distance.empty()) ++batch.without_distance;
  const auto declared = r.value("declared", nlohmann::json());
  s.declared_generated = declared.is_object() && declared.value("declares_generated", false);
  if (r.contains("prior") && r["prior"].is_number()) batch.priors.insert(r["prior"].get<double>());
  batch.images.push_back(std::move(s));
}

bool read_records(const std::string& input, const Model& model, Batch& batch) {
  std::ifstream file;
  if (input != "-") {
    file.open(input);
    if (!file) {
      std::cerr << "residue drift: cannot open " << input << "\n";
      return false;
    }
  }
  std::istream& in = input == "-" ? std::cin : file;
  std::string line;
  while (std::getline(in, line)) {
    if (line.find_first_not_of(" \t\r") == std::string::npos) continue;
    add_record(nlohmann::json::parse(line, nullptr, false), model, batch);
  }
  return true;
}

int run_drift(const DriftArgs& args) {
  auto model = load_model(args.model_path);
  if (!model) {
    std::cerr << "residue drift: " << model.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  if (!model->reference) {
    std::cerr << "residue drift: " << args.model_path
              << " keeps no training reference (it was trained before residue kept one): retrain it with "
                 "this version (the feature cache makes that quick)\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  Batch batch;
  for (const auto& input : args.inputs) {
    if (!read_records(input, *model, batch)) return static_cast<int>(ExitCode::kFailure);
  }
  if (batch.other_model > 0) {
    std::cerr << "residue drift: left out " << batch.other_model << " records scored by another model than "
              << model->id << "\n";
  }
  if (batch.malformed > 0)
    std::cerr << "residue drift: left out " << batch.malformed << " lines that are not scan records\n";
  if (batch.without_distance > 0) {
    std::cerr
        << "residue drift: " << batch.without_distance
        << " records carry no family_distance (scanned by an older residue); distance rows use the rest\n";
  }
  double prior = model->training_prior;
  std::string prior_source = "the training base rate";
  if (args.prior) {
    prior = *args.prior;
    prior_source = "--prior";
  } else if (batch.priors.size() == 1) {
    prior = *batch.priors.begin();
    prior_source = "the prior the records were scored with";
  }
  const DriftReport report = assess_drift(*model->reference, batch.images, prior);
  if (args.json) {
    nlohmann::ordered_json j = drift_to_json(report);
    j["model"] = model->id;
    j["prior_source"] = prior_source;
    j["records_left_out"] = {
        {"errors", batch.errors}, {"other_model", batch.other_model}, {"malformed", batch.malformed}};
    j["calibration"] = model->calibration_set
                           ? nlohmann::ordered_json(calibration_record_to_json(*model->calibration_set))
                           : nlohmann::ordered_json(nullptr);
    j["advisory"] = kAdvisoryNotice;
    std::cout << j.dump(2) << "\n";
  } else {
    std::cout << "Model " << model->id << "; error records left out: " << batch.errors << "; base rate from "
              << prior_source << ".\n"
              << drift_to_text(report) << "\n"
              << calibration_summary(*model) << "\n"
              << kAdvisoryNotice << "\n";
  }
  return report.verdict == "retrain" ? static_cast<int>(ExitCode::kCheckFailed) : 0;
}

}  // namespace

void add_drift_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<DriftArgs>();
  auto* cmd = app.add_subcommand(
      "drift", "Check whether recent scan records have moved away from the model's training data");
  cmd->add_option("model", args->model_path, "the model that scored the records")->required();
  cmd->add_option("records", args->inputs, "JSONL files from residue scan (or - for stdin)")->required();
  cmd->add_option("--prior", args->prior,
                  "share of generated images expected in the batch (default: the records' --prior if they "
                  "agree, else the training base rate)")
      ->check(CLI::Range(0.0, 1.0));
  cmd->add_flag("--json", args->json, "print the drift report as JSON");
  cmd->footer("Exit status: 0 stable or worth watching, 4 retraining looks due, 1 failure, 2 usage error.");
  cmd->callback([args, &exit_code] { exit_code = run_drift(*args); });
}

}  // namespace residue::cli
