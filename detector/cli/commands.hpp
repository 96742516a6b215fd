// The subcommands of `residue`: each registers its options and a callback that calls the libraries.
#pragma once

#include <CLI/CLI.hpp>

namespace residue::cli {

// Each adds one subcommand to `app`; its callback stores the process exit code in `exit_code`.
void add_features_command(CLI::App& app, int& exit_code);
void add_bench_command(CLI::App& app, int& exit_code);
void add_demo_command(CLI::App& app, int& exit_code);
void add_train_command(CLI::App& app, int& exit_code);
void add_calibrate_command(CLI::App& app, int& exit_code);
void add_audit_command(CLI::App& app, int& exit_code);
void add_evaluate_command(CLI::App& app, int& exit_code);
void add_compare_command(CLI::App& app, int& exit_code);
void add_drift_command(CLI::App& app, int& exit_code);
void add_scan_command(CLI::App& app, int& exit_code);
void add_report_command(CLI::App& app, int& exit_code);
void add_explain_command(CLI::App& app, int& exit_code);
void add_serve_command(CLI::App& app, int& exit_code);
void add_worker_command(CLI::App& app, int& exit_code);
void add_enqueue_command(CLI::App& app, int& exit_code);
void add_collect_command(CLI::App& app, int& exit_code);
void add_verdict_command(CLI::App& app, int& exit_code);

}  // namespace residue::cli
