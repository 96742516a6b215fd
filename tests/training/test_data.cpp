// Datasets, groups and folds, the feature cache, the audit and the model file.
#include <doctest/doctest.h>

#include <fstream>
#include <random>

#include "residue/training/audit.hpp"
#include "residue/training/cache.hpp"
#include "residue/training/groups.hpp"
#include "residue/training/model.hpp"
#include "support.hpp"

using namespace residue;

namespace {

PreparedItem item(Label label, const std::string& generator, const std::string& sha, std::uint64_t dhash,
                  const std::string& format = "png", int w = 512, int h = 512) {
  PreparedItem it;
  it.file.path = generator + "/" + sha;
  it.file.label = label;
  it.file.generator = label == Label::kCamera ? "camera" : generator;
  it.file.folder = generator;
  it.sha256 = sha;
  it.facts.format = format;
  it.facts.width = w;
  it.facts.height = h;
  it.facts.dhash = dhash;
  it.features.values.assign(feature_names().size(), 0.0);
  return it;
}

void touch(const std::filesystem::path& p) {
  std::filesystem::create_directories(p.parent_path());
  std::ofstream(p) << "x";
}

}  // namespace

TEST_CASE("labelled folders: camera/**, generated/<generator>/**, hidden and loose files reported") {
  const auto root = test::scratch() / "labelled";
  touch(root / "camera" / "a" / "1.jpg");
  touch(root / "camera" / "2.png");
  touch(root / "generated" / "gen-x" / "deep" / "3.png");
  touch(root / "generated" / "gen-y" / "4.png");
  touch(root / "generated" / "loose.png");
  touch(root / "generated" / "gen-y" / ".hidden.png");
  auto d = scan_labelled_folders(root);
  REQUIRE(d.ok());
  REQUIRE(d->files.size() == 4);
  CHECK(d->files[0].generator == "camera");
  CHECK(d->files[0].folder == "camera");  // camera/2.png sorts before camera/a/1.jpg
  CHECK(d->files[1].folder == "camera/a");
  CHECK(d->files[2].generator == "gen-x");
  CHECK(d->files[2].label == Label::kGenerated);
  CHECK(d->files[3].generator == "gen-y");
  CHECK(d->skipped.size() == 2);
  CHECK_FALSE(scan_labelled_folders(root / "camera" / "a").ok());  // no camera/ or generated/ inside
}

TEST_CASE("CSV manifest with quoting, relative paths and a bad label") {
  const auto dir = test::scratch() / "manifest";
  std::filesystem::create_directories(dir);
  std::ofstream(dir / "m.csv") << "path,label,generator,group\n"
                                  "\"a, b.jpg\",camera,,scene1\n"
                                  "x.png,generated,gen-z,scene1\n"
                                  "y.png,maybe,,\n";
  auto d = read_manifest(dir / "m.csv");
  REQUIRE(d.ok());
  REQUIRE(d->files.size() == 2);
  CHECK(d->files[0].path == (dir / "a, b.jpg").string());
  CHECK(d->files[0].group == "scene1");
  CHECK(d->files[1].generator == "gen-z");
  CHECK(d->skipped.size() == 1);
}

TEST_CASE("groups join exact and near duplicates; grouped folds never split a group") {
  std::vector<PreparedItem> items;
  std::mt19937_64 rng(1);
  for (int i = 0; i < 60; ++i) {
    items.push_back(item(i % 3 == 0 ? Label::kGenerated : Label::kCamera, i % 3 == 0 ? "g" : "c",
                         "sha" + std::to_string(i), rng()));
  }
  items[5].sha256 = items[4].sha256;                     // exact duplicate
  items[10].facts.dhash = items[11].facts.dhash ^ 0x7;   // 3 bits apart: near duplicate
  items[20].facts.dhash = items[21].facts.dhash ^ 0xFF;  // 8 bits apart: different
  const auto groups = assign_groups(items, GroupBy::kDuplicates);
  CHECK(groups[4] == groups[5]);
  CHECK(groups[10] == groups[11]);
  CHECK(groups[20] != groups[21]);
  std::vector<int> labels;
  for (const auto& it : items) labels.push_back(it.file.label == Label::kGenerated);
  const auto folds = grouped_folds(groups, labels, 5);
  for (size_t i = 0; i < items.size(); ++i) {
    for (size_t j = 0; j < items.size(); ++j) {
      if (groups[i] == groups[j]) CHECK(folds[i] == folds[j]);
    }
  }
  for (int f = 0; f < 5; ++f) {  // both labels in every fold
    int pos = 0;
    int neg = 0;
    for (size_t i = 0; i < items.size(); ++i) {
      if (folds[i] == f) (labels[i] ? pos : neg) += 1;
    }
    CHECK(pos >= 2);
    CHECK(neg >= 6);
  }
  const auto by_folder = assign_groups(items, GroupBy::kFolder);
  CHECK(by_folder[0] == by_folder[3]);  // both in folder "g"
}

TEST_CASE("the feature cache returns what was stored, keyed by content hash") {
  auto cache = FeatureCache::open(test::scratch() / "cache.sqlite");
  REQUIRE(cache.ok());
  FeatureCache::Entry e;
  e.facts.format = "jpeg";
  e.facts.jpeg_quality = 87;
  e.facts.dhash = 0xFEDCBA9876543210ULL;
  e.facts.metadata.camera_make = "Example Optics";
  e.features.values.assign(feature_names().size(), 0.0);
  e.features.values[3] = 1.25;
  REQUIRE((*cache)->store("abc", e).ok());
  CHECK_FALSE((*cache)->find("abd").has_value());
  const auto back = (*cache)->find("abc");
  REQUIRE(back.has_value());
  CHECK(back->facts.format == "jpeg");
  CHECK(back->facts.jpeg_quality == 87);
  CHECK(back->facts.dhash == 0xFEDCBA9876543210ULL);
  CHECK(back->facts.metadata.camera_make == "Example Optics");
  CHECK(back->features.values == e.features.values);
  CHECK((*cache)->size() == 1);
}

TEST_CASE("the audit warns of a planted container confound and of tiny generators") {
  std::vector<PreparedItem> items;
  for (int i = 0; i < 30; ++i)
    items.push_back(item(Label::kCamera, "c", "c" + std::to_string(i), i * 977ULL, "jpeg"));
  for (int i = 0; i < 30; ++i) {
    items.push_back(
        item(Label::kGenerated, i < 28 ? "big" : "tiny", "g" + std::to_string(i), i * 1.0e15, "png"));
  }
  const AuditReport r = audit_dataset(items, 0);
  CHECK(r.camera.count == 30);
  CHECK(r.generators.size() == 2);
  bool container = false;
  bool tiny = false;
  for (const auto& w : r.warnings) {
    container = container || w.find("Container confound") != std::string::npos;
    tiny = tiny || w.find("'tiny' has only 2") != std::string::npos;
  }
  CHECK(container);
  CHECK(tiny);
  // Same containers on both sides: no container warning.
  for (auto& it : items) it.facts.format = "png";
  for (const auto& w : audit_dataset(items, 0).warnings)
    CHECK(w.find("Container confound") == std::string::npos);
}

TEST_CASE("a model round-trips through its file; wrong extractor or damaged files are refused") {
  Model m;
  m.id = "m-test";
  m.created = "2026-12-02T00:00:00Z";
  m.extractor_version = std::string(kExtractorVersion);
  m.schema_id = feature_schema_id();
  auto index = select_features({"spectral.decay"});
  REQUIRE(index.ok());
  REQUIRE(index->size() == 3);
  for (size_t i : *index) m.features.push_back(feature_names()[i]);
  m.scaler.mean = {1, 2, 3};
  m.scaler.scale = {1, 0.5, 2};
  m.linear.weights = {0.5, -1, 0.25};
  m.linear.bias = 0.1;
  m.calibration = {-2.0, 0.3};
  m.training_prior = 0.25;
  m.thresholds = {0.8, 0.2, 0.01, 0.05, std::nullopt};
  const auto path = test::scratch() / "model.json";
  REQUIRE(save_model(m, path).ok());
  auto back = load_model(path);
  REQUIRE(back.ok());
  CHECK(back->features == m.features);
  CHECK(back->families == std::vector<std::string>{"spectral", "spectral", "spectral"});
  CHECK(back->linear.weights == m.linear.weights);
  CHECK(back->thresholds.likely_generated == 0.8);
  // Scoring: z = ((x - mean) / scale); margin = b + sum w z; P by Platt.
  FeatureVector x;
  x.values.assign(feature_names().size(), 0.0);
  x.values[(*index)[0]] = 3.0;  // z = 2
  x.values[(*index)[1]] = 2.0;  // z = 0
  x.values[(*index)[2]] = 7.0;  // z = 2
  const Score s = score(*back, x);
  CHECK(s.margin == doctest::Approx(0.1 + 0.5 * 2 + 0.25 * 2));
  CHECK(s.p_generated == doctest::Approx(1.0 / (1.0 + std::exp(-2.0 * 1.6 + 0.3))));
  CHECK(s.contributions.at("spectral") == doctest::Approx(1.5));
  CHECK(s.band == "likely-generated");
  CHECK(score(*back, x, 0.01).p_generated < s.p_generated);

  auto j = model_to_json(m);
  j["schema"]["extractor_version"] = "0.0.1";
  std::ofstream(test::scratch() / "old.json") << j.dump();
  auto old = load_model(test::scratch() / "old.json");
  REQUIRE_FALSE(old.ok());
  CHECK(old.error().message.find("retrain") != std::string::npos);
  std::ofstream(test::scratch() / "cut.json") << model_to_json(m).dump().substr(0, 200);
  auto cut = load_model(test::scratch() / "cut.json");
  REQUIRE_FALSE(cut.ok());
  CHECK(cut.error().code == ErrorCode::kCorrupt);
  CHECK_FALSE(load_model(test::scratch() / "absent.json").ok());
  // fuzz_model, 2026-12-03: a negative fractional count (converting -1.03 to an unsigned count is
  // undefined behaviour) and a histogram bin that is not a number are refused, not crashed on.
  auto counted = model_to_json(m);
  counted["thresholds"]["promise"] = {{"confidence", 0.95},
                                      {"camera_images", -1.03},
                                      {"camera_groups", 3},
                                      {"false_positive_images", 0},
                                      {"false_positive_groups", 0},
                                      {"fpr_upper_bound", 0.5},
                                      {"met", false},
                                      {"groups_needed", 5}};
  auto negative = model_from_json(nlohmann::json::parse(counted.dump()));
  REQUIRE_FALSE(negative.ok());
  CHECK(negative.error().code == ErrorCode::kCorrupt);
}
