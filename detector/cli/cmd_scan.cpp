// `residue scan MODEL PATH...`: one record per input (JSON lines, CSV or a terminal table),
// resumable (--resume) and shardable (--shard K/N).
#include <fnmatch.h>

#include <algorithm>
#include <atomic>
#include <cerrno>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <iostream>
#include <map>
#include <memory>
#include <thread>

#include "commands.hpp"
#include "options.hpp"
#include "progress.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/detector/scoring/scan.hpp"
#include "residue/features/fingerprint.hpp"
#include "residue/training/batch.hpp"

namespace residue::cli {

namespace {

struct ScanArgs {
  std::string model_path;
  std::vector<std::string> inputs;
  std::string output;
  std::string format = "jsonl";
  int jobs = static_cast<int>(std::max(1U, std::thread::hardware_concurrency()));
  std::vector<std::string> include;
  std::vector<std::string> exclude;
  std::string resume;
  std::string shard;
  std::string order = "input";
  ScanSettings settings;
};

// --order camera-tail: rarest among calibration camera photos first (smallest camera tail p-value,
// then highest P(generated)); records without a tail (errors, old models) last, in input order.
void sort_by_camera_tail(std::vector<nlohmann::ordered_json>& records) {
  auto p_value = [](const nlohmann::ordered_json& r) {
    return r.contains("camera_tail") && r["camera_tail"].is_object()
               ? r["camera_tail"]["p_value"].get<double>()
               : 2.0;
  };
  auto p = [](const nlohmann::ordered_json& r) {
    return r.contains("p_generated") ? r["p_generated"].get<double>() : -1.0;
  };
  std::stable_sort(records.begin(), records.end(), [&](const auto& a, const auto& b) {
    return p_value(a) != p_value(b) ? p_value(a) < p_value(b) : p(a) > p(b);
  });
}

bool matches_any(const std::string& path, const std::vector<std::string>& patterns) {
  return std::any_of(patterns.begin(), patterns.end(),
                     [&](const std::string& p) { return fnmatch(p.c_str(), path.c_str(), 0) == 0; });
}

// What an earlier (possibly interrupted) output already holds: path and content hash of records
// with a hash (a file changed since is scanned again), paths of records without one. A half-written last line
// is cut off so appending is clean.
struct Done {
  std::map<std::string, bool> hashes;  // path + content hash -> that record was an error
  std::map<std::string, bool> paths;   // path (records without a hash) -> error
};
Result<Done> load_resume(const std::string& file) {
  Done done;
  std::ifstream in(file, std::ios::binary);
  if (!in) return done;  // nothing yet: start afresh
  std::string text((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
  in.close();
  const size_t end = text.rfind('\n');
  const size_t keep = end == std::string::npos ? 0 : end + 1;
  if (keep != text.size()) std::filesystem::resize_file(file, keep);
  size_t start = 0;
  while (start < keep) {
    const size_t nl = text.find('\n', start);
    const auto j = nlohmann::json::parse(text.substr(start, nl - start), nullptr, false);
    start = nl + 1;
    if (j.is_discarded() || !j.is_object() || !j.contains("path")) continue;
    const bool failed = j.contains("error");
    const std::string path = path_of(j);  // the exact bytes, also for names that are not UTF-8
    if (j.contains("sha256") && j["sha256"].is_string()) {
      done.hashes[path + "\n" + j["sha256"].get<std::string>()] = failed;
    } else {
      done.paths[path] = failed;
    }
  }
  return done;
}

std::string csv_field(const std::string& s) {
  if (s.find_first_of(",\"\n") == std::string::npos) return s;
  std::string q = "\"";
  for (char c : s) q += c == '"' ? std::string("\"\"") : std::string(1, c);
  return q + "\"";
}

std::string csv_line(const nlohmann::ordered_json& r) {
  auto str = [&](const char* k) {
    if (!r.contains(k) || r[k].is_null()) return std::string();
    return r[k].is_string() ? valid_utf8(r[k].get<std::string>()) : record_line(r[k]);
  };
  std::string error_code, error_message;
  if (r.contains("error")) {
    error_code = r["error"]["code"];
    error_message = r["error"]["message"];
  }
  std::string tail = ",,,";
  if (r.contains("camera_tail") && r["camera_tail"].is_object()) {
    const auto& t = r["camera_tail"];
    tail = record_line(t["camera_photos_at_least"]) + "," + record_line(t["camera_photos"]) + "," +
           record_line(t["p_value"]) + "," + record_line(t["upper_bound"]);
  }
  return csv_field(str("path")) + "," + str("sha256") + "," + str("format") + "," + str("width") + "," +
         str("height") + "," + str("p_generated") + "," + str("band") + "," + str("margin") + "," +
         error_code + "," + csv_field(valid_utf8(error_message)) + "," + str("path_bytes") + "," + tail +
         "\n";
}

std::string table_line(const nlohmann::ordered_json& r) {
  char line[512];
  const std::string path = r["path"];  // valid UTF-8 (set_path)
  // Padded to 48 characters, not bytes (a name's accents or U+FFFD take several bytes, one column);
  // a longer path keeps its last 47 characters.
  std::vector<size_t> starts;  // byte offset of each character
  for (size_t i = 0; i < path.size(); ++i) {
    if ((static_cast<unsigned char>(path[i]) & 0xC0) != 0x80) starts.push_back(i);
  }
  std::string shown = starts.size() > 48 ? "…" + path.substr(starts[starts.size() - 47]) : path;
  shown += std::string(48 - std::min<size_t>(48, starts.size()), ' ');
  if (r.contains("error")) {
    std::snprintf(line, sizeof line, "%s  error %s: %s\n", shown.c_str(),
                  r["error"]["code"].get<std::string>().c_str(),
                  r["error"]["message"].get<std::string>().c_str());
  } else {
    const std::string declared =
        r["declared"].is_null()
            ? ""
            : (r["declared"]["declares_generated"].get<bool>() ? "declares generated" : "");
    std::string tail = "-";
    if (r.contains("camera_tail") && r["camera_tail"].is_object()) {
      tail = std::to_string(r["camera_tail"]["camera_photos_at_least"].get<size_t>()) + " of " +
             std::to_string(r["camera_tail"]["camera_photos"].get<size_t>()) + " camera";
    }
    // Why an inconclusive record is: the first reason up to its colon or parenthesis ("the file is
    // damaged", "too little fine detail left to judge"); the JSON record has the whole sentence.
    std::string why;
    if (r["band"] == "inconclusive" && r.contains("reasons") && !r["reasons"].empty()) {
      const std::string first = r["reasons"][0];
      why = first.substr(0, std::min(first.find(" ("), first.find(':')));
    }
    std::snprintf(line, sizeof line, "%s  %6.3f  %-16s %-18s %s%s%s\n", shown.c_str(),
                  r["p_generated"].get<double>(), r["band"].get<std::string>().c_str(), tail.c_str(),
                  declared.c_str(), declared.empty() || why.empty() ? "" : "; ", why.c_str());
  }
  return line;
}

int run_scan(ScanArgs& args) {
  if (args.settings.with_features && args.format != "jsonl") {
    std::cerr << "residue scan: --with-features needs --format jsonl (a vector has no place in "
              << args.format << ")\n";
    return static_cast<int>(ExitCode::kUsage);
  }
  auto model = load_model(args.model_path);
  if (!model) {
    std::cerr << "residue scan: " << model.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  int shard_k = 1;
  int shard_n = 1;
  if (!args.shard.empty() && (std::sscanf(args.shard.c_str(), "%d/%d", &shard_k, &shard_n) != 2 ||
                              shard_n < 1 || shard_k < 1 || shard_k > shard_n)) {
    std::cerr << "residue scan: --shard wants K/N with 1 <= K <= N, got '" << args.shard << "'\n";
    return static_cast<int>(ExitCode::kUsage);
  }
  auto expanded = expand_inputs(args.inputs, std::cin);
  std::vector<std::string> paths;
  for (const auto& p : expanded.files) {
    if (!args.include.empty() && !matches_any(p, args.include)) continue;
    if (matches_any(p, args.exclude)) continue;
    if (shard_n > 1 && static_cast<int>(fnv1a_64(p) % static_cast<std::uint64_t>(shard_n)) != shard_k - 1)
      continue;
    paths.push_back(p);
  }
  Done done;
  std::string output = args.output;
  if (!args.resume.empty() && args.format != "jsonl") {
    // The earlier output is read back record by record, which only JSON lines allow.
    std::cerr << "residue scan: --resume reads and appends JSON lines; use --format jsonl\n";
    return static_cast<int>(ExitCode::kUsage);
  }
  const bool sorted = args.order == "camera-tail";
  if (sorted && !args.resume.empty()) {
    std::cerr << "residue scan: --order camera-tail writes every record at the end, which --resume cannot "
                 "carry on from; scan with --resume first, then sort the records (residue report orders them "
                 "too)\n";
    return static_cast<int>(ExitCode::kUsage);
  }
  if (!args.resume.empty()) {
    auto loaded = load_resume(args.resume);
    if (!loaded) {
      std::cerr << "residue scan: " << loaded.error().message << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    done = std::move(*loaded);
    output = args.resume;
  }
  std::ofstream file;
  std::ostream* out = &std::cout;
  if (!output.empty()) {
    file.open(output, args.resume.empty() ? std::ios::trunc : std::ios::app);
    if (!file) {
      std::cerr << "residue scan: cannot write " << output << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
    out = &file;
  }
  if (args.format == "csv" && args.resume.empty()) {
    *out << "path,sha256,format,width,height,p_generated,band,margin,error_code,error_message,path_bytes,"
            "camera_photos_at_least,camera_photos,camera_tail_p_value,camera_tail_upper_bound\n";
  }
  size_t failed = 0;
  size_t written = 0;
  size_t skipped = 0;
  // A write that fails (disk full, file size limit) stops the scan; --resume OUTPUT later cuts a
  // half-written last line and carries on.
  std::atomic<bool> write_failed{false};
  int write_errno = 0;
  for (const auto& [path, message] : expanded.problems) {
    *out << record_line(error_record(path, {ErrorCode::kUnreadable, message})) << "\n";
    ++failed;
  }
  const Progress bar("images");
  std::map<std::string, size_t> bands;
  std::vector<nlohmann::ordered_json> held;  // --order camera-tail: written at the end
  auto write = [&](const nlohmann::ordered_json& r) {
    errno = 0;  // so that a failed write below leaves its reason
    if (args.format == "csv") {
      *out << csv_line(r);
    } else if (args.format == "table") {
      *out << table_line(r);
    } else {
      *out << record_line(r) << "\n";
    }
    out->flush();  // a killed scan loses at most the line being written
    if (!*out) {
      write_errno = errno;
      write_failed = true;
      return false;
    }
    ++written;
    return true;
  };
  ordered_parallel<nlohmann::ordered_json>(
      paths.size(), args.jobs,
      [&](size_t i) -> nlohmann::ordered_json {
        if (write_failed) return {{"stopped", true}};
        // Inputs already in the resumed output come back as {"already": failed?}.
        if (const auto it = done.paths.find(paths[i]); it != done.paths.end())
          return {{"already", it->second}};
        auto r = scan_file(paths[i], *model, args.settings);
        if (r["sha256"].is_string()) {
          if (const auto it = done.hashes.find(paths[i] + "\n" + r["sha256"].get<std::string>());
              it != done.hashes.end()) {
            return {{"already", it->second}};
          }
        }
        return r;
      },
      [&](size_t i, nlohmann::ordered_json& r) {
        if (write_failed || r.contains("stopped")) return;
        if (r.contains("already")) {
          ++skipped;
          if (r["already"].get<bool>()) ++failed;  // still failed, so the exit status says so
        } else {
          if (r.contains("error")) {
            ++failed;
          } else {
            ++bands[r["band"].get<std::string>()];
          }
          if (sorted) {
            held.push_back(std::move(r));
          } else if (!write(r)) {
            return;
          }
        }
        bar.update(i + 1, paths.size());
      });
  if (sorted) {
    sort_by_camera_tail(held);
    for (const auto& r : held) {
      if (!write(r)) break;
    }
  }
  if (args.format == "table" && !write_failed) {
    *out << "\n" << kAdvisoryNotice << "\n";
  }
  if (write_failed) {
    const std::string where = output.empty() ? "standard output" : output;
    std::cerr << "residue scan: cannot write " << where << ": "
              << (write_errno != 0 ? std::strerror(write_errno) : "write failed") << "; stopped after "
              << written << " records";
    if (!output.empty())
      std::cerr << " (residue scan --resume " << output
                << " carries on from its last complete line once there is room)";
    std::cerr << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::cerr << "residue scan: " << written << " records (" << bands["likely-generated"]
            << " likely-generated, " << bands["inconclusive"] << " inconclusive, " << bands["likely-camera"]
            << " likely-camera, " << failed << " failed)";
  if (skipped > 0) std::cerr << "; " << skipped << " already in " << args.resume;
  std::cerr << "\n";
  return failed > 0 ? static_cast<int>(ExitCode::kSomeInputsFailed) : 0;
}

}  // namespace

void add_scan_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<ScanArgs>();
  auto* cmd = app.add_subcommand("scan", "Score images with a model: one record per input");
  cmd->add_option("model", args->model_path, "model file from residue train")->required();
  cmd->add_option("inputs", args->inputs, "image files, folders (recursive) or - for paths on stdin")
      ->required();
  cmd->add_option("-o,--output", args->output, "write records to this file (flushed line by line)");
  cmd->add_option("--format", args->format, "jsonl (one JSON object per line), csv or table")
      ->check(CLI::IsMember({"jsonl", "csv", "table"}))
      ->capture_default_str();
  cmd->add_option("-j,--jobs", args->jobs, "parallel threads (default: cores)")->check(CLI::Range(1, 256));
  cmd->add_option("--include", args->include, "only paths matching these shell patterns (e.g. '*.jpg')");
  cmd->add_option("--exclude", args->exclude, "skip paths matching these shell patterns");
  cmd->add_option("--resume", args->resume,
                  "append to this earlier output, skipping inputs it already holds (by content hash)");
  cmd->add_option("--shard", args->shard, "K/N: take only the K-th of N deterministic slices of the inputs");
  cmd->add_option("--order", args->order,
                  "input (records as inputs finish, in input order) or camera-tail (rarest among the model's "
                  "calibration camera photos first; all records are written at the end)")
      ->check(CLI::IsMember({"input", "camera-tail"}))
      ->capture_default_str();
  cmd->add_option("--prior", args->settings.prior,
                  "deployment share of generated images (shifts P; docs/training.md)")
      ->check(CLI::Range(0.0001, 0.9999));
  cmd->add_option("--threshold", args->settings.likely_generated,
                  "P at or above which the band is likely-generated")
      ->check(CLI::Range(0.0, 1.0));
  cmd->add_option("--camera-threshold", args->settings.likely_camera,
                  "P below which the band is likely-camera")
      ->check(CLI::Range(0.0, 1.0));
  add_extract_options(*cmd, args->settings.extract);
  add_carry_options(*cmd, args->settings);
  cmd->footer(
      "Exit status: 0 every input scored, 3 some inputs failed (each has an error record), 1 failure, 2 "
      "usage error.");
  cmd->callback([args, &exit_code] { exit_code = run_scan(*args); });
}

}  // namespace residue::cli
