// `residue features FILE...`: one JSON object per file with the named trace values.
#include <iostream>
#include <memory>
#include <thread>

#include "commands.hpp"
#include "options.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/training/atomic_file.hpp"
#include "residue/training/batch.hpp"

namespace residue::cli {

namespace {

struct FeaturesArgs {
  std::vector<std::string> inputs;
  std::string output;
  int jobs = static_cast<int>(std::max(1U, std::thread::hardware_concurrency()));
  ExtractOptions extract;
};

int run_features(const FeaturesArgs& args) {
  const auto expanded = expand_inputs(args.inputs, std::cin);
  AtomicTextFile file;
  if (!args.output.empty()) {
    auto opened = AtomicTextFile::open(args.output);
    if (!opened) {
      std::cerr << "residue features: " << opened.error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    file = std::move(*opened);
  }
  const auto emit = [&](const nlohmann::ordered_json& record) {
    const std::string line = record_line(record) + "\n";
    if (args.output.empty()) {
      std::cout << line;
    } else {
      file.write(line);
    }
  };
  size_t failed = expanded.problems.size();
  for (const auto& [path, message] : expanded.problems) {
    emit(error_record(path, {ErrorCode::kUnreadable, message}));
  }
  extract_batch(expanded.files, args.extract, args.jobs,
                [&](size_t, const std::string& path, const Result<Extraction>& result) {
                  if (result) {
                    emit(features_record(path, *result));
                  } else {
                    ++failed;
                    emit(error_record(path, result.error()));
                  }
                });
  if (!args.output.empty()) {
    if (auto committed = file.commit(); !committed) {
      std::cerr << "residue features: " << committed.error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
  }
  if (failed > 0) {
    std::cerr << "residue features: " << failed << " of " << expanded.files.size() + expanded.problems.size()
              << " inputs failed (see their error records)\n";
    return static_cast<int>(ExitCode::kSomeInputsFailed);
  }
  return static_cast<int>(ExitCode::kOk);
}

}  // namespace

void add_features_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<FeaturesArgs>();
  auto* cmd = app.add_subcommand("features", "Print the named trace values of each image as one JSON line");
  cmd->add_option("inputs", args->inputs, "image files, folders (walked recursively) or - for paths on stdin")
      ->required();
  cmd->add_option("-o,--output", args->output,
                  "write the JSON lines to this file (atomically) instead of stdout");
  cmd->add_option("-j,--jobs", args->jobs, "parallel extraction threads (default: cores)")
      ->check(CLI::Range(1, 256))
      ->capture_default_str();
  add_extract_options(*cmd, args->extract);
  cmd->footer(
      "Exit status: 0 every input extracted, 3 some inputs failed (each has an error record), 2 usage "
      "error.");
  cmd->callback([args, &exit_code] { exit_code = run_features(*args); });
}

}  // namespace residue::cli
