// residue: tells camera photographs from generated images by the traces generators leave.
#include <malloc.h>

#include <csignal>
#include <exception>
#include <iostream>

#include "commands.hpp"
#include "residue/detector/scoring/record.hpp"

int main(int argc, char** argv) try {
  // Past a file size limit (ulimit -f), a write should fail with EFBIG and be reported like a full
  // disk, not kill the process with SIGXFSZ halfway through a file.
  std::signal(SIGXFSZ, SIG_IGN);
  // Each window allocates planes of a few hundred KiB. By default glibc hands memory above its
  // trim threshold back to the kernel and maps large blocks afresh, so every window paid for page
  // faults on memory it had just freed (a fifth of the time in the profile, docs/performance.md).
  // Keep freed memory for reuse: peak memory is unchanged, it is only no longer returned between
  // windows. Blocks over 64 MiB (whole files) are still mapped and unmapped on their own.
  mallopt(M_MMAP_THRESHOLD, 64 << 20);
  mallopt(M_TRIM_THRESHOLD, 256 << 20);
  CLI::App app{"residue: screens images for traces of generative models (advisory evidence, not proof)"};
  app.require_subcommand(1);
  app.set_version_flag("--version", "residue 0.1.0");
  int exit_code = 0;
  residue::cli::add_train_command(app, exit_code);
  residue::cli::add_calibrate_command(app, exit_code);
  residue::cli::add_scan_command(app, exit_code);
  residue::cli::add_report_command(app, exit_code);
  residue::cli::add_explain_command(app, exit_code);
  residue::cli::add_serve_command(app, exit_code);
  residue::cli::add_worker_command(app, exit_code);
  residue::cli::add_enqueue_command(app, exit_code);
  residue::cli::add_collect_command(app, exit_code);
  residue::cli::add_verdict_command(app, exit_code);
  residue::cli::add_audit_command(app, exit_code);
  residue::cli::add_evaluate_command(app, exit_code);
  residue::cli::add_compare_command(app, exit_code);
  residue::cli::add_drift_command(app, exit_code);
  residue::cli::add_features_command(app, exit_code);
  residue::cli::add_bench_command(app, exit_code);
  residue::cli::add_demo_command(app, exit_code);
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    const int code = app.exit(e);
    return code == 0 ? 0 : static_cast<int>(residue::ExitCode::kUsage);
  } catch (const std::exception& e) {
    std::cerr << "residue: " << e.what() << "\n";
    return static_cast<int>(residue::ExitCode::kFailure);
  }
  return exit_code;
} catch (const std::exception& e) {
  std::cerr << "residue: " << e.what() << "\n";
  return static_cast<int>(residue::ExitCode::kFailure);
}
