#include "residue/detector/demo/demo.hpp"

#include <cstdio>
#include <fstream>
#include <map>
#include <random>

#include "residue/detector/demo/sample_images.hpp"
#include "residue/detector/pages/report_page.hpp"
#include "residue/detector/scoring/explain.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/detector/scoring/scan.hpp"
#include "residue/training/atomic_file.hpp"
#include "residue/training/batch.hpp"
#include "residue/training/cache.hpp"
#include "residue/training/trainer.hpp"

namespace residue {

namespace fs = std::filesystem;

namespace {

struct Maker {
  std::vector<Image> photos;
  std::mt19937 rng{2026};

  // A random crop of a random photograph; sides between lo and hi, even.
  Image random_crop(int lo, int hi) {
    const Image& p = photos[std::uniform_int_distribution<size_t>(0, photos.size() - 1)(rng)];
    const int w = std::min(p.width, std::uniform_int_distribution<int>(lo, hi)(rng)) / 2 * 2;
    const int h = std::min(p.height, std::uniform_int_distribution<int>(lo, hi)(rng)) / 2 * 2;
    const int x = std::uniform_int_distribution<int>(0, p.width - w)(rng);
    const int y = std::uniform_int_distribution<int>(0, p.height - h)(rng);
    return crop(p, x, y, w, h);
  }

  // Alternates JPEG (quality 88..95) and PNG so the container says nothing about the class.
  static Result<fs::path> save(const Image& image, const fs::path& stem, int index) {
    const bool jpeg = index % 2 == 0;
    auto bytes = encode_image(image, jpeg ? ImageFormat::kJpeg : ImageFormat::kPng, 88 + index % 8);
    if (!bytes) return bytes.error();
    fs::path path = stem;
    path += jpeg ? ".jpg" : ".png";
    fs::create_directories(path.parent_path());
    std::ofstream(path, std::ios::binary)
        .write(reinterpret_cast<const char*>(bytes->data()), static_cast<std::streamsize>(bytes->size()));
    return path;
  }
};

// A JPEG damaged in transfer: `flips` single-bit flips in its entropy-coded data (after the SOS
// header, before the EOI marker), drawn from `seed`. libjpeg decodes past such damage with a
// "Corrupt JPEG data" warning.
std::vector<std::uint8_t> damaged_in_transfer(std::vector<std::uint8_t> bytes, unsigned seed, int flips) {
  size_t start = 0;
  for (size_t i = 0; i + 3 < bytes.size(); ++i) {
    if (bytes[i] == 0xFF && bytes[i + 1] == 0xDA) {
      start = i + 2 + (static_cast<size_t>(bytes[i + 2]) << 8U | bytes[i + 3]);
      break;
    }
  }
  if (start == 0 || start + 3 > bytes.size()) return bytes;
  std::mt19937 rng(seed);
  std::uniform_int_distribution<size_t> where(start, bytes.size() - 3);
  std::uniform_int_distribution<int> bit(0, 7);
  for (int k = 0; k < flips; ++k)
    bytes[where(rng)] ^= static_cast<std::uint8_t>(1U << static_cast<unsigned>(bit(rng)));
  return bytes;
}

}  // namespace

Result<DemoPaths> run_contest_demo(const fs::path& photo_dir, const fs::path& out, int jobs,
                                   std::ostream& log) {
  Maker maker;
  for (const auto& p : sample_photos(photo_dir)) {
    auto bytes = read_file(p);
    if (!bytes) continue;
    auto image = decode_image(*bytes);
    if (image && image->channels == 3 && std::min(image->width, image->height) >= 300) {
      maker.photos.push_back(std::move(*image));
    }
  }
  if (maker.photos.size() < 3)
    return make_error(ErrorCode::kUnreadable, "too few sample photographs in " + photo_dir.string());
  std::error_code ec;
  fs::remove_all(out / "training", ec);
  fs::remove_all(out / "entries", ec);
  log << "1. Training folders from " << maker.photos.size() << " open photographs (scikit-image samples) and "
      << "SIMULATED generator output (two upsampling decoders, made here)\n";
  const SimulatedDecoder decoders[] = {SimulatedDecoder::kTransposedConvolution,
                                       SimulatedDecoder::kNearestSmoothed};
  const char* decoder_names[] = {"simulated-decoder-a", "simulated-decoder-b"};
  for (int i = 0; i < 40; ++i) {
    char name[64];
    std::snprintf(name, sizeof name, "member-photo-%03d", i);
    if (auto r = Maker::save(maker.random_crop(256, 400), out / "training" / "camera" / name, i); !r)
      return r.error();
    const int d = i % 2;
    std::snprintf(name, sizeof name, "sample-%03d", i);
    if (auto r = Maker::save(simulate_decoder_output(maker.random_crop(256, 400), decoders[d]),
                             out / "training" / "generated" / decoder_names[d] / name, i / 2);
        !r) {
      return r.error();
    }
  }
  std::ofstream truth(out / "entries-truth.csv");
  truth << "entry,truth\n";
  for (int i = 0; i < 20; ++i) {
    char name[64];
    std::snprintf(name, sizeof name, "entry-%03d", i);
    const bool simulated = i % 3 == 1;
    const Image image = simulated ? simulate_decoder_output(maker.random_crop(256, 400), decoders[i % 2])
                                  : maker.random_crop(256, 400);
    auto path = Maker::save(image, out / "entries" / name, i);
    if (!path) return path.error();
    if (i == 4) {  // one camera entry declares itself a camera capture in its XMP
      auto bytes = read_file(*path);
      if (bytes) {
        const auto tagged = with_digital_source_type(*bytes, "digitalCapture");
        std::ofstream(*path, std::ios::binary)
            .write(reinterpret_cast<const char*>(tagged.data()), static_cast<std::streamsize>(tagged.size()));
      }
    }
    truth << path->filename().string() << "," << (simulated ? "simulated-generated" : "camera-photo") << "\n";
  }
  {
    std::ofstream broken(out / "entries" / "entry-020.jpg", std::ios::binary);
    broken << "\xFF\xD8\xFF\xE0 this upload was cut off";
    truth << "entry-020.jpg,broken-upload\n";
  }
  {
    // A camera photo whose upload was damaged in transfer: it decodes, but is never judged.
    auto bytes = encode_image(maker.random_crop(256, 400), ImageFormat::kJpeg, 90);
    if (!bytes) return bytes.error();
    const auto damaged = damaged_in_transfer(*bytes, 21, 20);
    std::ofstream(out / "entries" / "entry-021.jpg", std::ios::binary)
        .write(reinterpret_cast<const char*>(damaged.data()), static_cast<std::streamsize>(damaged.size()));
    truth << "entry-021.jpg,damaged-upload\n";
    truth.close();
  }

  log << "2. Training (audit, features, grouped cross-validation, calibration)\n";
  auto dataset = scan_labelled_folders(out / "training");
  if (!dataset) return dataset.error();
  auto cache = FeatureCache::open(out / "feature-cache.sqlite");
  TrainSettings settings;  // defaults, augmentation included
  settings.jobs = jobs;
  auto prepared = prepare_dataset(*dataset, {}, cache ? cache->get() : nullptr, jobs, {}, settings.augment);
  const AuditReport audit = audit_dataset(prepared.items, prepared.failed.size());
  log << audit_to_text(audit);
  if (audit.duplicate_pairs_across_classes > 0) {
    log << "   (Expected here: the demo cuts camera and simulated pictures from the same few photographs, "
           "so\n"
           "    some crops overlap across the classes. In real data, check such pairs.)\n";
  }
  auto trained = train_model(prepared.items, settings, audit, prepared.copies);
  if (!trained) return trained.error();
  DemoPaths paths{out / "model.json", out / "scan.jsonl", out / "report.html", out / "explain",
                  out / "entries-truth.csv"};
  if (auto saved = save_model(trained->model, paths.model); !saved) return saved.error();
  char line[256];
  std::snprintf(line, sizeof line, "   cross-validated ROC AUC %.3f, ECE %.3f; model %s\n",
                trained->cv.report.overall.roc_auc, trained->cv.report.overall.ece,
                trained->model.id.c_str());
  log << line;

  log << "3. Scanning the contest entries (one is a broken upload, one was damaged in transfer)\n";
  std::vector<std::string> entries;
  for (const auto& e : fs::directory_iterator(out / "entries")) entries.push_back(e.path().string());
  std::sort(entries.begin(), entries.end());
  ReportInput report;
  report.sources = {paths.scan.string()};
  report.model = trained->model;
  std::string jsonl;
  ordered_parallel<nlohmann::ordered_json>(
      entries.size(), jobs, [&](size_t i) { return scan_file(entries[i], trained->model, {}); },
      [&](size_t, nlohmann::ordered_json& r) {
        jsonl += r.dump() + "\n";
        report.records.push_back(nlohmann::json::parse(r.dump()));
      });
  if (auto w = write_file_atomically(paths.scan, jsonl); !w) return w.error();
  std::map<std::string, std::string> truth_of;
  {
    std::ifstream in(paths.truth);
    std::string row;
    std::getline(in, row);
    while (std::getline(in, row)) truth_of[row.substr(0, row.find(','))] = row.substr(row.find(',') + 1);
  }
  std::snprintf(line, sizeof line, "   %-14s %-20s %8s  %-17s %s\n", "entry", "truth (demo only)", "P(gen.)",
                "band", "camera photos as high");
  log << line;
  const nlohmann::json* top = nullptr;
  for (const auto& r : report.records) {
    const std::string name = fs::path(r["path"].get<std::string>()).filename().string();
    if (r.contains("error")) {
      std::snprintf(line, sizeof line, "   %-14s %-20s %8s  error: %s\n", name.c_str(),
                    truth_of[name].c_str(), "-", r["error"]["code"].get<std::string>().c_str());
    } else {
      const auto& t = r["camera_tail"];
      const std::string tail = t.is_object() ? std::to_string(t["camera_photos_at_least"].get<size_t>()) +
                                                   " of " + std::to_string(t["camera_photos"].get<size_t>())
                                             : "-";
      const bool damaged =
          !r["reasons"].empty() && r["reasons"][0].get<std::string>().starts_with("the file is damaged");
      std::snprintf(line, sizeof line, "   %-14s %-20s %8.3f  %-17s %-8s%s%s\n", name.c_str(),
                    truth_of[name].c_str(), r["p_generated"].get<double>(),
                    r["band"].get<std::string>().c_str(), tail.c_str(),
                    r["declared"].is_null() ? "" : "  (metadata declares a camera capture)",
                    damaged ? "  (the file is damaged: not judged)" : "");
      if (top == nullptr || r["p_generated"].get<double>() > (*top)["p_generated"].get<double>()) top = &r;
    }
    log << line;
  }

  log << "4. Report and explanation\n";
  if (auto w = write_file_atomically(paths.report, report_page(report)); !w) return w.error();
  if (top != nullptr) {
    auto explained = explain_image((*top)["path"], trained->model, {}, paths.explain_dir);
    if (!explained) return explained.error();
  }
  return paths;
}

}  // namespace residue
