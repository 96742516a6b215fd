// `residue demo`: a community photo contest screens its entries (docs/demo.md).
#include <filesystem>
#include <iostream>
#include <memory>
#include <thread>

#include "commands.hpp"
#include "residue/detector/demo/demo.hpp"
#include "residue/detector/demo/sample_images.hpp"
#include "residue/detector/scoring/record.hpp"

namespace residue::cli {

namespace {

struct DemoArgs {
  std::string output_dir = "residue-demo";
  int jobs = static_cast<int>(std::max(1U, std::thread::hardware_concurrency()));
};

int run_demo(const DemoArgs& args) {
  const auto dir = sample_photo_dir();
  if (!dir) {
    std::cerr << "residue demo: scikit-image's sample photographs were not found; install python3-skimage "
                 "(scripts/setup.sh does) or set RESIDUE_SAMPLE_DIR\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  std::cout
      << "residue demo: a community photo contest screens its entries for generated images.\n"
         "The 'generated' pictures here are SIMULATED (two upsampling decoders applied to open photos);\n"
         "no real generator output and no real person's pictures are involved.\n\n";
  const auto start = std::chrono::steady_clock::now();
  auto paths = run_contest_demo(*dir, args.output_dir, args.jobs, std::cout);
  if (!paths) {
    std::cerr << "residue demo: " << paths.error().message << "\n";
    return static_cast<int>(ExitCode::kFailure);
  }
  const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  std::cout << "\nDone in " << static_cast<int>(seconds) << " s. Open these:\n"
            << "  report       " << std::filesystem::absolute(paths->report).string() << "\n"
            << "  explanation  " << std::filesystem::absolute(paths->explain_dir).string()
            << "/ (summary.txt, pictures)\n"
            << "  records      " << paths->scan.string() << "   model " << paths->model.string() << "\n\n"
            << kAdvisoryNotice << "\n";
  return 0;
}

}  // namespace

void add_demo_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<DemoArgs>();
  auto* cmd =
      app.add_subcommand("demo", "Run the built-in demonstration (photo contest screening its entries)");
  cmd->add_option("-o,--output-dir", args->output_dir, "folder for the demo's outputs")
      ->capture_default_str();
  cmd->add_option("-j,--jobs", args->jobs, "parallel threads (default: cores)")->check(CLI::Range(1, 256));
  cmd->callback([args, &exit_code] { exit_code = run_demo(*args); });
}

}  // namespace residue::cli
