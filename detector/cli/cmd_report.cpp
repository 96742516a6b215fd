// `residue report SCAN.jsonl... -o REPORT.html` and `residue explain MODEL IMAGE -o DIR`.
#include <fstream>
#include <iostream>
#include <map>
#include <memory>
#include <set>

#include "commands.hpp"
#include "options.hpp"
#include "residue/detector/pages/report_page.hpp"
#include "residue/detector/scoring/explain.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/detector/scoring/scan.hpp"
#include "residue/training/atomic_file.hpp"

namespace residue::cli {

namespace {

struct ReportArgs {
  std::vector<std::string> scans;
  std::string output;
  std::string model_path;
  std::string verdicts;
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
  if (!args.verdicts.empty()) {
    auto store = VerdictStore::open(args.verdicts);
    auto all = store ? (*store)->list() : Result<std::vector<Verdict>>(store.error());
    if (!all) {
      std::cerr << "residue report: --verdicts: " << all.error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    std::map<std::string, std::set<std::string>> judged;  // sha256 -> verdicts given
    for (const auto& v : *all) judged[v.sha256].insert(v.verdict);
    VerdictAgreement agreement;
    std::set<std::string> counted;
    for (const auto& r : in.records) {
      if (!r.contains("sha256") || !r["sha256"].is_string() || !r.contains("band") || !r["band"].is_string())
        continue;
      const std::string sha = r["sha256"];
      const auto j = judged.find(sha);
      if (j == judged.end() || j->second.size() != 1 || !counted.insert(sha).second) continue;
      add_agreement(agreement, *j->second.begin(), r["band"]);
    }
    in.verdicts = agreement;
    in.verdicts_source = args.verdicts;
  }
  if (auto w = write_file_atomically(args.output, report_page(in)); !w) {
    std::cerr << "residue report: " << w.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::cout << "residue report: " << in.records.size() << " records -> " << args.output << "\n";
  return 0;
}

int run_explain(const ExplainArgs& args) {
  auto model = load_model(args.model_path);
  if (!model) {
    std::cerr << "residue explain: " << model.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  auto explanation = explain_image(args.image, *model, args.settings, args.output_dir);
  if (!explanation) {
    std::cerr << "residue explain: " << args.image << ": " << explanation.error().message << "\n";
    return static_cast<int>(explanation.error().code == ErrorCode::kInternal ? ExitCode::kFailure
                                                                             : ExitCode::kSomeInputsFailed);
  }
  std::cout << explanation->text;
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
  cmd->add_option(
      "--verdicts", args->verdicts,
      "verdict store: show how the records' bands agreed with reviewers' verdicts on the same images");
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
  add_window_threads_option(*cmd, args->settings.extract);
  cmd->callback([args, &exit_code] { exit_code = run_explain(*args); });
}

}  // namespace residue::cli
