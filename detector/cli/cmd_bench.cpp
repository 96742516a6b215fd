// `residue bench`: decode and feature timings on simulated images, and the thread speed-up.
#include <sys/resource.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <memory>
#include <random>
#include <thread>

#include "commands.hpp"
#include "residue/detector/demo/sample_images.hpp"
#include "residue/features/families.hpp"
#include "residue/features/window_threads.hpp"
#include "residue/training/batch.hpp"
#include "residue/training/trainer.hpp"

namespace residue::cli {

namespace {

using Clock = std::chrono::steady_clock;

struct BenchArgs {
  int repeats = 5;
  int batch = 24;
  std::string workdir;
  int training_size = 0;     // > 0: time training on this many simulated cached vectors instead
  int training_copies = 4;   // simulated augmented copies per image (--augment full makes 4)
  int training_windows = 4;  // simulated window vectors per instance (0: image-level learning)
};

// Training from cached vectors: `n` simulated feature vectors (two overlapping Gaussian clouds,
// one per class, 20 % generated, in 50 simulated generator folders), each with `copies` augmented
// copies and `windows` window vectors per instance (the vector plus noise), grouped 5-fold CV
// over the default C grid (and both poolings), Platt, thresholds and the final fit. Peak memory is
// the process's maximum RSS.
int run_training_bench(int n, int copies, int windows) {
  std::mt19937 rng(17);
  std::normal_distribution<double> noise(0.0, 1.0);
  const size_t d = feature_names().size();
  std::vector<PreparedItem> items(static_cast<size_t>(n));
  for (int i = 0; i < n; ++i) {
    PreparedItem& it = items[static_cast<size_t>(i)];
    const bool generated = i % 5 == 0;
    it.file.label = generated ? Label::kGenerated : Label::kCamera;
    it.file.generator = generated ? "sim-" + std::to_string(i % 50) : "camera";
    it.sha256 = std::to_string(i);
    it.facts.dhash = rng();
    it.features.values.resize(d);
    for (size_t j = 0; j < d; ++j) it.features.values[j] = noise(rng) + (generated && j % 7 == 0 ? 0.4 : 0.0);
  }
  auto jittered = [&](const std::vector<double>& v) {
    std::vector<double> out(v);
    for (double& x : out) x += 0.3 * noise(rng);
    return out;
  };
  std::vector<PreparedItem> copy_items;
  for (size_t i = 0; i < items.size(); ++i) {
    for (int c = 0; c < copies; ++c) {
      PreparedItem copy = items[i];
      copy.features.values = jittered(items[i].features.values);
      copy.augmentation = "simulated-" + std::to_string(c);
      copy.source = i;
      copy_items.push_back(std::move(copy));
    }
  }
  for (auto* list : {&items, &copy_items}) {
    for (auto& it : *list) {
      for (int w = 0; w < windows; ++w) it.features.windows.push_back(jittered(it.features.values));
    }
  }
  const auto start = Clock::now();
  const AuditReport audit = audit_dataset(items, 0);
  const auto audited = Clock::now();
  TrainSettings settings;
  settings.augment = Augment::kNone;  // the copies are simulated here, not made from files
  settings.window_instances = windows > 0;
  settings.jobs = static_cast<int>(std::max(1U, std::thread::hardware_concurrency()));
  auto outcome = train_model(items, settings, audit, copy_items);
  const double train_s = std::chrono::duration<double>(Clock::now() - audited).count();
  rusage usage{};
  getrusage(RUSAGE_SELF, &usage);
  if (!outcome) {
    std::cerr << "residue bench: " << outcome.error().message << "\n";
    return 1;
  }
  std::printf(
      "training on %d cached vectors (%zu features, simulated) with %d copies each and %d windows per "
      "instance (%s): audit %.2f s, grouped 5-fold CV over %zu C values + Platt + final fit %.1f s, peak "
      "memory "
      "%.0f MiB, chosen C %g, out-of-fold AUC %.3f\n",
      n, d, copies, windows, outcome->model.instances.c_str(),
      std::chrono::duration<double>(audited - start).count(), outcome->cv.auc_by_c.size(), train_s,
      usage.ru_maxrss / 1024.0, outcome->cv.chosen_c, outcome->cv.report.overall.roc_auc);
  std::printf("solver passes (most over the folds) per C:");
  for (size_t ci = 0; ci < outcome->cv.auc_by_c.size(); ++ci)
    std::printf(" %g: %d%s", outcome->cv.auc_by_c[ci].first, outcome->cv.solver_by_c[ci].passes,
                outcome->cv.solver_by_c[ci].converged ? "" : " (limit)");
  std::printf("; final fit %d\n", outcome->cv.final_solver.passes);
  return 0;
}

double ms_since(Clock::time_point start) {
  return std::chrono::duration<double, std::milli>(Clock::now() - start).count();
}

template <typename F>
double median_ms(int repeats, F&& f) {
  std::vector<double> t;
  for (int r = 0; r < repeats; ++r) {
    const auto start = Clock::now();
    f();
    t.push_back(ms_since(start));
  }
  std::sort(t.begin(), t.end());
  return t[t.size() / 2];
}

struct Case {
  std::string label;
  std::filesystem::path path;
};

void bench_case(const Case& c, int repeats) {
  std::ifstream in(c.path, std::ios::binary);
  const std::vector<std::uint8_t> bytes((std::istreambuf_iterator<char>(in)),
                                        std::istreambuf_iterator<char>());
  const double plain_decode = median_ms(repeats, [&] { (void)decode_plain_8bit(bytes); });
  const double full_decode = median_ms(repeats, [&] { (void)decode_image(bytes); });
  const double window_decode = median_ms(repeats, [&] { (void)decode_windows(bytes); });
  auto decoded = decode_windows(bytes);
  if (!decoded) {
    std::cout << c.label << ": " << decoded.error().message << "\n";
    return;
  }
  // As extraction runs them: the families, then the processing evidence on the same windows
  // (it reuses their p-map spectra).
  std::vector<FamilyTimings> runs(repeats);
  std::vector<double> processing_runs;
  for (auto& t : runs) {
    const auto windows = window_inputs(decoded->tiles);
    (void)extract_windows(windows, &t);
    const auto start = Clock::now();
    (void)assess_processing(*decoded, std::nullopt, &windows);
    processing_runs.push_back(ms_since(start));
  }
  std::sort(processing_runs.begin(), processing_runs.end());
  auto med = [&](double FamilyTimings::*field) {
    std::vector<double> v;
    v.reserve(runs.size());
    for (const auto& t : runs) v.push_back(t.*field);
    std::sort(v.begin(), v.end());
    return v[v.size() / 2];
  };
  const double spectral = med(&FamilyTimings::spectral_ms);
  const double noise = med(&FamilyTimings::noise_ms);
  const double resampling = med(&FamilyTimings::resampling_ms);
  const double sensor = med(&FamilyTimings::sensor_ms);
  const double texture = med(&FamilyTimings::texture_ms);
  const double coding = med(&FamilyTimings::coding_ms);
  const double surprise = med(&FamilyTimings::surprise_ms);
  const double processing = processing_runs[processing_runs.size() / 2];
  const double families = spectral + noise + resampling + sensor + texture + coding + surprise;
  const double total = window_decode + families + processing;
  const auto windows = static_cast<double>(std::max<size_t>(1, decoded->layout.origins.size()));
  std::printf(
      "%-20s %6.1f %6.1f %8.1f %9.1f %6.1f %8.1f %7.1f %8.1f %7.1f %8.1f %8.1f %7.1f %8.2f %8.2f  %5.2f  "
      "%2zu x %d "
      "px, %llu of %d rows decoded\n",
      c.label.c_str(), plain_decode, full_decode, window_decode, spectral, noise, resampling, sensor, texture,
      coding, surprise, processing, total, total / plain_decode, families / windows,
      families > 0 ? families / window_decode : 0.0, decoded->layout.origins.size(), decoded->layout.size,
      static_cast<unsigned long long>(decoded->decoded_rows), decoded->header.height);
}

int run_bench(const BenchArgs& args) {
  if (args.training_size > 0)
    return run_training_bench(args.training_size, args.training_copies, args.training_windows);
  namespace fs = std::filesystem;
  const fs::path dir =
      args.workdir.empty() ? fs::temp_directory_path() / "residue-bench" : fs::path(args.workdir);
  fs::create_directories(dir);
  std::cout << "residue bench: simulated scenes (smooth colour structure + noise sigma 2), written to "
            << dir.string() << "\nthreads available: " << std::thread::hardware_concurrency()
            << ", repeats per figure: " << args.repeats << " (median)\n\n";
  const struct {
    const char* label;
    const char* file;
    int w, h;
    ImageFormat format;
  } specs[] = {{"png 512x512", "scene-512.png", 512, 512, ImageFormat::kPng},
               {"png 1024x1024", "scene-1024.png", 1024, 1024, ImageFormat::kPng},
               {"jpeg 4000x3000 q90", "scene-12mp.jpg", 4000, 3000, ImageFormat::kJpeg}};
  std::vector<Case> cases;
  for (const auto& s : specs) {
    const auto encoded = encode_image(simulated_scene(s.w, s.h, 7), s.format, 90);
    if (!encoded) {
      std::cerr << "residue bench: " << encoded.error().message << "\n";
      return 1;
    }
    const fs::path path = dir / s.file;
    std::ofstream(path, std::ios::binary)
        .write(reinterpret_cast<const char*>(encoded->data()), static_cast<std::streamsize>(encoded->size()));
    cases.push_back({s.label, path});
  }
  std::printf("%-20s %6s %6s %8s %9s %6s %8s %7s %8s %7s %8s %8s %7s %8s %8s  %5s\n", "image (ms)", "8-bit",
              "float", "windows", "spectral", "noise", "resampl", "sensor", "texture", "coding", "surprise",
              "process", "total", "tot/8bit", "ms/win", "feat/dec");
  for (const auto& c : cases) bench_case(c, args.repeats);
  std::printf(
      "\n8-bit = the reference: the whole image decoded straight to 8-bit colour (libjpeg-turbo, libpng),\n"
      "as a plain decoder such as Pillow does it; float = our whole decode into float planes;\n"
      "windows = only the analysis windows' pixels decoded;\n"
      "process = processing evidence (reported, not learned: palette, resampling, JPEG history);\n"
      "total = windows + the six families + processing; tot/8bit = total / the 8-bit reference;\n"
      "ms/win = the six families' time per analysis window; feat/dec = that time / window-decode time.\n\n");

  // One image at a time, as an idle service or `explain` scores it: the whole path's wall time with
  // its windows on 1 .. cores threads (window_threads.hpp).
  std::printf("one image on an idle machine, whole path (extract_bytes), wall ms by window threads:\n");
  for (const auto& c : cases) {
    std::ifstream in(c.path, std::ios::binary);
    const std::vector<std::uint8_t> bytes((std::istreambuf_iterator<char>(in)),
                                          std::istreambuf_iterator<char>());
    std::printf("  %-20s", c.label.c_str());
    double single = 0.0;
    for (int threads = 1; threads <= available_cores(); ++threads) {
      ExtractOptions options;
      options.window_threads = threads;
      const double ms = median_ms(args.repeats, [&] { (void)extract_bytes(bytes, options); });
      if (threads == 1) single = ms;
      std::printf("  %d: %6.1f (x%.2f)", threads, ms, single / ms);
    }
    std::printf("\n");
  }
  std::printf("\n");

  std::vector<std::string> batch;
  batch.reserve(static_cast<size_t>(args.batch));
  for (int i = 0; i < args.batch; ++i) batch.push_back(cases[i % 2].path.string());
  double one = 0.0;
  for (int jobs : {1, 2}) {
    const auto start = Clock::now();
    extract_batch(batch, {}, jobs, [](size_t, const std::string&, const Result<Extraction>&) {});
    const double ms = ms_since(start);
    if (jobs == 1) one = ms;
    std::printf("batch of %d PNGs (512 and 1024 px), %d thread%s: %8.1f ms, %6.1f images/s, speed-up %.2f\n",
                args.batch, jobs, jobs == 1 ? " " : "s", ms, 1000.0 * args.batch / ms, one / ms);
  }
  return 0;
}

}  // namespace

void add_bench_command(CLI::App& app, int& exit_code) {
  auto args = std::make_shared<BenchArgs>();
  auto* cmd = app.add_subcommand("bench", "Measure decode and feature-extraction speed on simulated images");
  cmd->add_option("--repeats", args->repeats, "runs per figure; the median is printed")
      ->check(CLI::Range(1, 100))
      ->capture_default_str();
  cmd->add_option("--batch", args->batch, "images in the thread speed-up batch")
      ->check(CLI::Range(2, 10000))
      ->capture_default_str();
  cmd->add_option("--workdir", args->workdir,
                  "folder for the generated test images (default: a temp folder)");
  cmd->add_option("--training-size", args->training_size,
                  "instead: time training on this many simulated cached feature vectors")
      ->check(CLI::Range(20, 1000000));
  cmd->add_option("--training-copies", args->training_copies,
                  "with --training-size: augmented copies per image")
      ->check(CLI::Range(0, 16))
      ->capture_default_str();
  cmd->add_option("--training-windows", args->training_windows,
                  "with --training-size: window vectors per instance (0: image-level learning)")
      ->check(CLI::Range(0, 64))
      ->capture_default_str();
  cmd->callback([args, &exit_code] { exit_code = run_bench(*args); });
}

}  // namespace residue::cli
