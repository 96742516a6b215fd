// `residue verdict add|list|export|remove`: reviewers' verdicts in batches (verdicts.hpp).
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <memory>
#include <set>

#include "commands.hpp"
#include "dataset_options.hpp"
#include "options.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/features/fingerprint.hpp"
#include "residue/training/atomic_file.hpp"
#include "residue/training/carried.hpp"
#include "residue/training/dataset.hpp"
#include "residue/training/verdicts.hpp"

namespace residue::cli {

namespace {

struct VerdictArgs {
  std::string store;
  std::vector<std::string> inputs;  // add: CSV or JSONL files; remove: ids
  std::string output = "-";
  std::string sha256;
  bool conflicts = false;
  bool json = false;
  std::string cache_path;
  bool no_cache = false;
  ExtractOptions extract;
};

// One input row: the verdict, and the image file when the row names one.
struct Row {
  std::string where;  // file:line
  Result<Verdict> verdict = make_error(ErrorCode::kEmpty, "");
  std::string path;
};

std::vector<Row> read_rows(const std::string& file, std::istream& in) {
  std::vector<Row> rows;
  std::string line;
  std::vector<std::string> header;
  size_t number = 0;
  while (std::getline(in, line)) {
    ++number;
    if (!line.empty() && line.back() == '\r') line.pop_back();
    if (line.find_first_not_of(" \t") == std::string::npos) continue;
    Row row{file + ":" + std::to_string(number), make_error(ErrorCode::kEmpty, ""), ""};
    if (line.front() == '{') {  // JSON lines: an export line, or a scan record given a "verdict"
      const auto j = nlohmann::json::parse(line, nullptr, false);
      if (j.is_discarded()) {
        row.verdict = make_error(ErrorCode::kCorrupt, "not valid JSON");
      } else {
        row.verdict = verdict_from_json(j);
        if (j.is_object() && !j.contains("features") && j.contains("path") && j["path"].is_string())
          row.path = path_of(j);
      }
      rows.push_back(std::move(row));
      continue;
    }
    if (header.empty()) {  // CSV: the first line names the columns
      header = split_csv(line);
      continue;
    }
    const auto fields = split_csv(line);
    nlohmann::json j = nlohmann::json::object();
    for (size_t c = 0; c < header.size() && c < fields.size(); ++c) {
      if (!fields[c].empty()) j[header[c]] = fields[c];
    }
    if (j.contains("path")) row.path = j["path"].get<std::string>();
    if (!row.path.empty() && std::filesystem::path(row.path).is_relative() && file != "-")
      row.path = (std::filesystem::path(file).parent_path() / row.path).string();
    j.erase("path");
    if (!row.path.empty() && !j.contains("sha256")) j["sha256"] = std::string(64, '0');  // filled below
    row.verdict = verdict_from_json(j);
    rows.push_back(std::move(row));
  }
  return rows;
}

std::unique_ptr<VerdictStore> open_store(const std::string& path) {
  auto store = VerdictStore::open(path);
  if (!store) {
    std::cerr << "residue verdict: " << store.error().message << "\n";
    return nullptr;
  }
  return std::move(*store);
}

int run_add(const VerdictArgs& args) {
  auto store = open_store(args.store);
  if (!store) return static_cast<int>(ExitCode::kFailure);
  std::unique_ptr<FeatureCache> cache;
  if (!args.no_cache) {
    const std::string path = args.cache_path.empty() ? default_cache_path() : args.cache_path;
    if (std::filesystem::exists(path)) {
      if (auto opened = FeatureCache::open(path)) cache = std::move(*opened);
    }
  }
  size_t added = 0;
  size_t failed = 0;
  size_t with_vector = 0;
  size_t conflicts = 0;
  for (const auto& input : args.inputs) {
    std::ifstream file;
    if (input != "-") {
      file.open(input);
      if (!file) {
        std::cerr << "residue verdict add: cannot open " << input << "\n";
        return static_cast<int>(ExitCode::kFailure);
      }
    }
    for (auto& row : read_rows(input, input == "-" ? std::cin : file)) {
      if (!row.verdict) {
        std::cerr << "  " << row.where << ": refused: " << row.verdict.error().message << "\n";
        ++failed;
        continue;
      }
      Verdict v = std::move(*row.verdict);
      if (!row.path.empty()) {  // the image is here: its hash and its vector come from it
        auto bytes = read_file(row.path, args.extract.limits);
        if (!bytes) {
          std::cerr << "  " << row.where << ": " << row.path << ": " << bytes.error().message << "\n";
          ++failed;
          continue;
        }
        v.sha256 = sha256_hex(*bytes);
        auto item = prepare_bytes(*bytes, v.sha256, args.extract, cache.get());
        if (item) {
          v.features = carried_to_json(*item);
        } else {
          std::cerr << "  " << row.where << ": " << row.path << ": recorded without a vector ("
                    << item.error().message << ")\n";
        }
      } else if (!v.features && cache) {  // a hash alone: the feature cache may know the image
        if (auto hit = cache->find(v.sha256)) {
          PreparedItem item;
          item.facts = std::move(hit->facts);
          item.features = std::move(hit->features);
          v.features = carried_to_json(item);
        }
      }
      auto stored = store->add(std::move(v));
      if (!stored) {
        std::cerr << "residue verdict add: " << stored.error().message << "\n";
        return static_cast<int>(ExitCode::kFailure);
      }
      ++added;
      with_vector += stored->verdict.features.has_value();
      if (stored->conflict) {
        ++conflicts;
        std::cerr << "  " << row.where << ": conflict: " << stored->verdict.sha256.substr(0, 12)
                  << " is now judged " << stored->verdict.verdict << " (verdict " << stored->verdict.id
                  << ") and otherwise before";
        for (const auto& e : stored->earlier) std::cerr << " (verdict " << e.id << ": " << e.verdict << ")";
        std::cerr << "\n";
      }
    }
  }
  std::cout << added << " verdicts recorded in " << args.store << " (" << with_vector
            << " with a feature vector)";
  if (conflicts > 0)
    std::cout << "; " << conflicts << " conflict with earlier verdicts (residue verdict list --conflicts)";
  if (failed > 0) std::cout << "; " << failed << " rows refused";
  std::cout << "\n";
  return failed > 0 ? static_cast<int>(ExitCode::kSomeInputsFailed) : 0;
}

int run_list(const VerdictArgs& args) {
  auto store = open_store(args.store);
  if (!store) return static_cast<int>(ExitCode::kFailure);
  auto all = store->list(args.sha256);
  auto conflicted = store->conflicts();
  if (!all || !conflicted) {
    std::cerr << "residue verdict list: " << (all ? conflicted.error() : all.error()).message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  const std::set<std::string> in_conflict(conflicted->begin(), conflicted->end());
  if (!args.json) {
    std::printf("%-6s %-20s %-14s %-9s %-18s %-12s %-6s %s\n", "id", "recorded", "sha256", "verdict",
                "generator", "reviewer", "vector", "");
  }
  size_t shown = 0;
  for (const auto& v : *all) {
    const bool conflict = in_conflict.contains(v.sha256);
    if (args.conflicts && !conflict) continue;
    ++shown;
    if (args.json) {
      auto j = verdict_to_json(v, false);
      j["conflict"] = conflict;
      std::cout << record_line(j) << "\n";
      continue;
    }
    std::printf(
        "%-6lld %-20s %-14s %-9s %-18s %-12s %-6s %s\n", static_cast<long long>(v.id), v.recorded.c_str(),
        v.sha256.substr(0, 12).c_str(), v.verdict.c_str(), v.generator.empty() ? "-" : v.generator.c_str(),
        v.reviewer.empty() ? "-" : v.reviewer.c_str(), v.features ? "yes" : "no", conflict ? "CONFLICT" : "");
  }
  if (!args.json) {
    std::cout << shown << " verdicts; " << conflicted->size()
              << " images judged both camera and generated (left out of training until one verdict is "
                 "removed)\n";
  }
  return 0;
}

int run_export(const VerdictArgs& args) {
  auto store = open_store(args.store);
  if (!store) return static_cast<int>(ExitCode::kFailure);
  auto all = store->list(args.sha256);
  if (!all) {
    std::cerr << "residue verdict export: " << all.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::string text;
  for (const auto& v : *all) text += record_line(verdict_to_json(v)) + "\n";
  if (args.output == "-") {
    std::cout << text;
  } else if (auto written = write_file_atomically(args.output, text); !written) {
    std::cerr << "residue verdict export: " << written.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  } else {
    std::cerr << all->size() << " verdicts written to " << args.output << "\n";
  }
  return 0;
}

int run_remove(const VerdictArgs& args) {
  auto store = open_store(args.store);
  if (!store) return static_cast<int>(ExitCode::kFailure);
  size_t removed = 0;
  for (const auto& id : args.inputs) {
    long long n = 0;
    try {
      size_t used = 0;
      n = std::stoll(id, &used);
      if (used != id.size()) throw std::invalid_argument(id);
    } catch (const std::exception&) {
      std::cerr << "residue verdict remove: '" << id << "' is not a verdict id (see residue verdict list)\n";
      return static_cast<int>(ExitCode::kUsage);
    }
    auto r = store->remove(n);
    if (!r) {
      std::cerr << "residue verdict remove: " << r.error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    if (*r == 0) std::cerr << "residue verdict remove: no verdict " << n << "\n";
    removed += *r;
  }
  std::cout << removed << " verdicts removed from " << args.store << "\n";
  return removed == args.inputs.size() ? 0 : static_cast<int>(ExitCode::kSomeInputsFailed);
}

void add_store_option(CLI::App& cmd, VerdictArgs& args) {
  cmd.add_option("--verdicts", args.store, "verdict store (SQLite; created when missing)")->required();
}

}  // namespace

void add_verdict_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<VerdictArgs>();
  auto* cmd =
      app.add_subcommand("verdict", "Record reviewers' verdicts (camera or generated) for retraining");
  cmd->require_subcommand(1);
  cmd->footer(
      "Examples:\n"
      "  residue verdict add --verdicts verdicts.sqlite judged.csv      (CSV: path or "
      "sha256,verdict[,generator,reviewer,note])\n"
      "  residue verdict list --verdicts verdicts.sqlite --conflicts\n"
      "  residue verdict export --verdicts verdicts.sqlite -o verdicts.jsonl\n"
      "  residue verdict remove --verdicts verdicts.sqlite 17\n"
      "  residue train ROOT --from OLD --verdicts verdicts.sqlite -o NEW\n"
      "Each subcommand's --help lists its options (docs/training.md, \"Reviewers' verdicts\").");

  auto* add = cmd->add_subcommand(
      "add",
      "Record verdicts from CSV (header: path or sha256, verdict, and optionally generator, reviewer, note) "
      "or "
      "JSON lines (verdict export lines, or scan records given a \"verdict\" member); - reads stdin");
  add_store_option(*add, *args);
  add->add_option("inputs", args->inputs, "CSV or JSONL files")->required();
  add->add_option(
      "--cache", args->cache_path,
      "feature cache to take vectors from for rows given by hash (default " + default_cache_path() + ")");
  add->add_flag("--no-cache", args->no_cache, "use and store no cached vectors");
  add_extract_options(*add, args->extract);
  add->footer("Exit status: 0 all recorded, 3 some rows refused (each named on stderr), 1 failure.");
  add->callback([args, &exit_code] { exit_code = run_add(*args); });

  auto* list = cmd->add_subcommand("list", "List verdicts, oldest first, with conflicts marked");
  add_store_option(*list, *args);
  list->add_option("--sha256", args->sha256, "only this image's verdicts");
  list->add_flag("--conflicts", args->conflicts, "only images judged both camera and generated");
  list->add_flag("--json", args->json, "JSON lines instead of a table");
  list->callback([args, &exit_code] { exit_code = run_list(*args); });

  auto* exp = cmd->add_subcommand("export", "Write every verdict, with its feature vector, as JSON lines");
  add_store_option(*exp, *args);
  exp->add_option("-o,--output", args->output, "file (written whole, then renamed) or - for stdout")
      ->capture_default_str();
  exp->add_option("--sha256", args->sha256, "only this image's verdicts");
  exp->callback([args, &exit_code] { exit_code = run_export(*args); });

  auto* rm = cmd->add_subcommand("remove", "Take verdicts back by id (residue verdict list shows them)");
  add_store_option(*rm, *args);
  rm->add_option("ids", args->inputs, "verdict ids")->required();
  rm->callback([args, &exit_code] { exit_code = run_remove(*args); });
}

}  // namespace residue::cli
