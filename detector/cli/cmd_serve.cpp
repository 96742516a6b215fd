// `residue serve MODEL --port N`: the moderation-queue HTTP service (docs/service.md).
#include <fstream>
#include <iostream>
#include <memory>

#include "commands.hpp"
#include "options.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/detector/service/service.hpp"
#include "stop_signals.hpp"

namespace residue::cli {

namespace {

struct ServeArgs {
  std::string model_path;
  std::string token_file;
  double max_body_mb = 50;
  ServiceSettings settings;
};

int run_serve(ServeArgs& args) {
  if (!args.token_file.empty()) {
    args.settings.token = first_line_of(args.token_file);
    if (args.settings.token.empty()) {
      std::cerr << "residue serve: no token in " << args.token_file << "\n";
      return static_cast<int>(ExitCode::kFailure);
    }
  }
  args.settings.max_body_bytes = static_cast<std::size_t>(args.max_body_mb * 1048576.0);
  Service service(args.settings, args.model_path);
  if (auto loaded = service.load_model(); !loaded) {
    std::cerr << "residue serve: " << loaded.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  const StopOnSignals stopper([&service] { service.stop(); });
  if (auto result = service.run(); !result) {
    std::cerr << "residue serve: " << result.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  return 0;
}

}  // namespace

void add_serve_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<ServeArgs>();
  auto* cmd = app.add_subcommand("serve", "Serve scores over HTTP for a moderation queue (docs/service.md)");
  cmd->add_option("model", args->model_path, "model file")->required();
  cmd->add_option("--host", args->settings.host, "address to bind")->capture_default_str();
  cmd->add_option("--port", args->settings.port, "port (0: any free port, printed in the log)")
      ->check(CLI::Range(0, 65535))
      ->capture_default_str();
  cmd->add_option("--workers", args->settings.workers, "scoring threads (default: cores)")
      ->check(CLI::Range(1, 256));
  cmd->add_option("--queue", args->settings.queue, "requests allowed to wait for a worker; beyond, 503")
      ->check(CLI::Range(0, 10000))
      ->capture_default_str();
  cmd->add_option("--max-body-mb", args->max_body_mb, "largest request body in MiB (413 above)")
      ->check(CLI::PositiveNumber)
      ->capture_default_str();
  cmd->add_option("--timeout", args->settings.timeout_seconds,
                  "seconds one read or write on a connection may wait")
      ->check(CLI::Range(1, 3600))
      ->capture_default_str();
  cmd->add_option("--max-connections", args->settings.max_connections,
                  "connections open at once (one thread each); beyond, 503 and closed (raise ulimit -n "
                  "above about 1,000)")
      ->check(CLI::Range(1, 10000))
      ->capture_default_str();
  cmd->add_option("--header-timeout", args->settings.header_timeout_seconds,
                  "seconds a client has to send a request's head, from connecting or from the last answer; "
                  "then the connection is cut")
      ->check(CLI::Range(1, 3600))
      ->capture_default_str();
  cmd->add_option("--body-timeout", args->settings.body_timeout_seconds,
                  "seconds a client has to send a request's body, from its head; then the connection is cut")
      ->check(CLI::Range(1, 36000))
      ->capture_default_str();
  cmd->add_option("--token-file", args->token_file,
                  "file whose first line is the bearer token clients must send");
  cmd->add_flag("--allow-unauthenticated", args->settings.allow_unauthenticated,
                "bind a non-loopback address without a token (only behind an authenticating proxy)");
  cmd->add_option("--access-log", args->settings.access_log,
                  "append JSON access-log lines here (default: stderr)");
  cmd->add_option("--verdicts", args->settings.verdicts,
                  "record reviewers' verdicts (POST /v1/verdicts, the review page's buttons) in this SQLite "
                  "file, with the images' feature vectors");
  cmd->add_option("--remember", args->settings.remember,
                  "with --verdicts: feature vectors of the last images scored kept in memory (about 25 KB of "
                  "memory each), "
                  "so that a verdict can be given by hash after the image is gone")
      ->check(CLI::Range(0, 1000000))
      ->capture_default_str();
  cmd->add_option("--prior", args->settings.scan.prior, "default deployment share of generated images")
      ->check(CLI::Range(0.0001, 0.9999));
  add_extract_options(*cmd, args->settings.scan.extract);
  add_window_threads_option(*cmd, args->settings.scan.extract);
  cmd->callback([args, &exit_code] { exit_code = run_serve(*args); });
}

}  // namespace residue::cli
