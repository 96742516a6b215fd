// `residue worker`, `residue enqueue`, `residue collect`: scoring spread over machines through
// Redis Streams consumer groups (docs/queue.md).
#include <unistd.h>

#include <atomic>
#include <chrono>
#include <cstdio>
#include <ctime>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <memory>
#include <optional>

#include "commands.hpp"
#include "options.hpp"
#include "residue/detector/queue/work_queue.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/training/batch.hpp"
#include "stop_signals.hpp"

namespace residue::cli {

namespace {

constexpr const char* kDefaultRedis = "redis://127.0.0.1:6379";

struct ConnectionArgs {
  std::string url = kDefaultRedis;
  std::string password_file;
  double timeout_s = 5.0;
};

void add_connection_options(CLI::App& cmd, ConnectionArgs& args) {
  cmd.add_option("--redis", args.url, "redis://[:password@]host[:port][/db]")->capture_default_str();
  cmd.add_option("--redis-password-file", args.password_file,
                 "file whose first line is the Redis password, kept out of the process list (overrides "
                 "one in --redis; an empty file: no password)")
      ->check(CLI::ExistingFile);
  cmd.add_option("--timeout", args.timeout_s, "seconds to wait for Redis to connect or reply")
      ->check(CLI::Range(0.1, 600.0))
      ->capture_default_str();
}

std::optional<QueueConnection> connection_of(const ConnectionArgs& args, const char* command) {
  auto address = parse_redis_url(args.url);
  if (!address) {
    std::cerr << "residue " << command << ": " << address.error().message << "\n";
    return std::nullopt;
  }
  // An empty file means no password (what a packaged unit is given when Redis has none).
  if (!args.password_file.empty()) address->password = first_line_of(args.password_file);
  QueueConnection c;
  c.address = *address;
  c.timeout = std::chrono::milliseconds(static_cast<long>(args.timeout_s * 1000));
  return c;
}

QueueLog log_to_stderr(const std::string& command) {
  return [command](const std::string& line) { std::cerr << "residue " << command << ": " << line << "\n"; };
}

std::string default_consumer() {
  char host[256] = {};
  gethostname(host, sizeof host - 1);
  return std::string(host) + "-" + std::to_string(getpid());
}

// ---- worker ----

struct WorkerArgs {
  std::string model_path;
  ConnectionArgs connection;
  WorkerSettings settings;
  double block_s = 1.0;
  double reclaim_after_s = 30.0;
  bool keep_jobs = false;
};

int run_worker_command(WorkerArgs& args) {
  auto model = load_model(args.model_path);
  if (!model) {
    std::cerr << "residue worker: " << model.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  auto connection = connection_of(args.connection, "worker");
  if (!connection) return static_cast<int>(ExitCode::kUsage);
  WorkerSettings& s = args.settings;
  s.connection = *connection;
  if (s.consumer.empty()) s.consumer = default_consumer();
  if (s.results.empty()) s.results = s.stream + ":results";
  s.block = std::chrono::milliseconds(static_cast<long>(args.block_s * 1000));
  s.reclaim_after = std::chrono::milliseconds(static_cast<long>(args.reclaim_after_s * 1000));
  s.delete_done = !args.keep_jobs;
  if (s.block >= s.connection.timeout) {
    std::cerr << "residue worker: --block must be shorter than --timeout\n";
    return static_cast<int>(ExitCode::kUsage);
  }
  std::atomic<bool> stop{false};
  const StopOnSignals stopper([&stop] { stop = true; });
  const auto log = log_to_stderr("worker " + s.consumer);
  log("model " + model->id + "; jobs from " + s.stream + " (group " + s.group + "), results to " + s.results);
  auto stats = run_worker(*model, s, stop, log);
  if (!stats) {
    log(stats.error().message);
    return static_cast<int>(ExitCode::kFailure);
  }
  log("stopped: scored " + std::to_string(stats->scored) + ", error records " +
      std::to_string(stats->failed) + ", given up " + std::to_string(stats->gave_up) + ", taken over " +
      std::to_string(stats->reclaimed) + ", left for retry " + std::to_string(stats->retried) +
      ", reconnections " + std::to_string(stats->reconnects));
  return 0;
}

// ---- enqueue ----

struct EnqueueArgs {
  ConnectionArgs connection;
  EnqueueSettings settings;
  std::vector<std::string> inputs;
};

std::string default_batch() {
  const std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y%m%dT%H%M%SZ", &tm);
  return std::string(buf) + "-" + std::to_string(getpid());
}

int run_enqueue(EnqueueArgs& args) {
  auto connection = connection_of(args.connection, "enqueue");
  if (!connection) return static_cast<int>(ExitCode::kUsage);
  args.settings.connection = *connection;
  if (args.settings.batch.empty()) args.settings.batch = default_batch();
  const ExpandedInputs expanded = expand_inputs(args.inputs, std::cin);
  for (const auto& [path, message] : expanded.problems)
    std::cerr << "residue enqueue: " << path << ": " << message << "\n";
  auto stats = enqueue_jobs(expanded.files, args.settings, log_to_stderr("enqueue"));
  if (!stats) {
    std::cerr << "residue enqueue: " << stats.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  for (const auto& [path, error] : stats->refused) {
    std::cerr << "residue enqueue: not sent: " << path << ": " << error_code_name(error.code) << ": "
              << error.message << "\n";
  }
  std::cerr << "residue enqueue: " << stats->enqueued << " jobs in " << args.settings.stream << ", job ids "
            << args.settings.batch << "/0 .. " << args.settings.batch << "/"
            << (stats->enqueued + stats->refused.size()) - 1 << "\n";
  std::cout << args.settings.batch << "\n";
  const bool problems = !stats->refused.empty() || !expanded.problems.empty();
  return problems ? static_cast<int>(ExitCode::kSomeInputsFailed) : 0;
}

// ---- collect ----

struct CollectArgs {
  ConnectionArgs connection;
  CollectSettings settings;
  std::string output = "-";
  std::optional<size_t> expect;
  double wait_s = 60.0;
};

int run_collect(CollectArgs& args) {
  auto connection = connection_of(args.connection, "collect");
  if (!connection) return static_cast<int>(ExitCode::kUsage);
  args.settings.connection = *connection;
  args.settings.expect = args.expect;
  args.settings.wait = std::chrono::milliseconds(static_cast<long>(args.wait_s * 1000));
  // A file is written beside its final name and renamed when complete, so a reader never sees half.
  const bool to_stdout = args.output == "-";
  const std::string partial = args.output + ".partial-" + std::to_string(getpid());
  std::ofstream file;
  if (!to_stdout) {
    file.open(partial, std::ios::binary | std::ios::trunc);
    if (!file) {
      std::cerr << "residue collect: cannot write " << partial << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
  }
  std::ostream& out = to_stdout ? std::cout : file;
  auto stats = collect_results(
      args.settings, [&out](const std::string& record) { out << record << "\n"; }, log_to_stderr("collect"));
  out.flush();
  if (!stats) {
    std::cerr << "residue collect: " << stats.error().message << "\n";
    if (!to_stdout) std::filesystem::remove(partial);
    return static_cast<int>(ExitCode::kFailure);
  }
  if (!to_stdout) {
    file.close();
    std::error_code ec;
    std::filesystem::rename(partial, args.output, ec);
    if (ec || !file) {
      std::cerr << "residue collect: cannot write " << args.output << ": " << ec.message() << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
  }
  std::cerr << "residue collect: " << stats->records << " results";
  if (stats->duplicates > 0) std::cerr << " (" << stats->duplicates << " repeated deliveries dropped)";
  std::cerr << "\n";
  if (!stats->complete) {
    std::cerr << "residue collect: only " << stats->records << " of the " << *args.expect
              << " expected results after " << args.wait_s << " s\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  return 0;
}

}  // namespace

void add_worker_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<WorkerArgs>();
  auto* cmd = app.add_subcommand(
      "worker", "Score jobs from a Redis stream as part of a consumer group (docs/queue.md)");
  cmd->add_option("model", args->model_path, "model file")->required();
  add_connection_options(*cmd, args->connection);
  WorkerSettings& s = args->settings;
  cmd->add_option("--stream", s.stream, "stream of jobs")->required();
  cmd->add_option("--group", s.group, "consumer group")->default_val("residue")->capture_default_str();
  cmd->add_option("--consumer", s.consumer, "this worker's name in the group (default: host-pid)");
  cmd->add_option("--results", s.results, "stream for result records (default: <stream>:results)");
  cmd->add_option("--jsonl", s.jsonl_path, "also append each record to this file (may repeat after a retry)");
  cmd->add_option("--read-count", s.read_count, "jobs taken per read")
      ->check(CLI::Range(1, 1000))
      ->capture_default_str();
  cmd->add_option("--block", args->block_s,
                  "seconds to wait for new jobs per read (also how fast a stop is noticed)")
      ->check(CLI::Range(0.01, 60.0))
      ->capture_default_str();
  cmd->add_option("--reclaim-after", args->reclaim_after_s,
                  "seconds a job may stay unacknowledged before another worker takes it over")
      ->check(CLI::Range(0.1, 86400.0))
      ->capture_default_str();
  cmd->add_option("--max-deliveries", s.max_deliveries,
                  "deliveries before a job gets a 'gave-up' error record instead of another try")
      ->check(CLI::Range(1, 100))
      ->capture_default_str();
  cmd->add_flag("--keep-jobs", args->keep_jobs,
                "keep finished jobs in the stream (default: deleted when done)");
  cmd->add_option("--prior", s.scan.prior, "deployment share of generated images")
      ->check(CLI::Range(0.0001, 0.9999));
  add_extract_options(*cmd, s.scan.extract);
  add_carry_options(*cmd, s.scan);
  cmd->footer(
      "Stops on SIGTERM or SIGINT after finishing and acknowledging the jobs it holds.\n"
      "Exit status: 0 stopped cleanly, 1 failure (model refused, Redis refused the password), 2 usage "
      "error.");
  cmd->callback([args, &exit_code] { exit_code = run_worker_command(*args); });
}

void add_enqueue_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<EnqueueArgs>();
  auto* cmd = app.add_subcommand("enqueue", "Add scoring jobs to a Redis stream (docs/queue.md)");
  cmd->add_option("inputs", args->inputs, "files, folders (walked), or - for paths on stdin")->required();
  add_connection_options(*cmd, args->connection);
  cmd->add_option("--stream", args->settings.stream, "stream of jobs")->required();
  cmd->add_option("--batch", args->settings.batch, "job ids are <batch>/<n> (default: UTC time and pid)");
  cmd->add_flag("--bytes", args->settings.send_bytes,
                "send the image bytes instead of the path (workers without the shared storage)");
  cmd->add_option("--pipeline", args->settings.pipeline, "jobs per round trip")
      ->check(CLI::Range(1, 100000))
      ->capture_default_str();
  cmd->footer(
      "Prints the batch name on stdout. Exit status: 0 all enqueued, 3 some inputs not sent, 1 failure, 2 "
      "usage error.");
  cmd->callback([args, &exit_code] { exit_code = run_enqueue(*args); });
}

void add_collect_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<CollectArgs>();
  auto* cmd = app.add_subcommand(
      "collect", "Read the result stream into JSONL that residue report accepts, one record per job id");
  add_connection_options(*cmd, args->connection);
  cmd->add_option("--results", args->settings.results, "stream of result records")->required();
  cmd->add_option("-o,--output", args->output, "JSONL file (written whole, then renamed), or - for stdout")
      ->capture_default_str();
  cmd->add_option("--expect", args->expect, "wait until this many distinct jobs have results");
  cmd->add_option("--wait", args->wait_s, "with --expect: give up after this many seconds")
      ->check(CLI::Range(0.0, 1e6))
      ->capture_default_str();
  cmd->add_flag("--trim", args->settings.trim, "delete the collected entries from the result stream");
  cmd->footer("Exit status: 0 done, 1 failure (or fewer results than --expect in time), 2 usage error.");
  cmd->callback([args, &exit_code] { exit_code = run_collect(*args); });
}

}  // namespace residue::cli
