// Augmentation draws, the parametrised transforms they name, window pooling and window-level
// scoring, and the cache's window vectors.
#include <doctest/doctest.h>

#include <cmath>
#include <regex>
#include <set>

#include "residue/features/compression.hpp"
#include "residue/features/decode.hpp"
#include "residue/features/transforms.hpp"
#include "residue/training/augment.hpp"
#include "residue/training/cache.hpp"
#include "residue/training/model.hpp"
#include "support.hpp"

using namespace residue;

TEST_CASE("augmentation copies are drawn from the file hash, within the documented ranges") {
  const std::string a(64, 'a');
  const std::string b = "0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef";
  CHECK(augmentation_transforms(Augment::kNone, a).empty());
  CHECK(augmentation_transforms(Augment::kLight, a).size() == 2);
  const auto full = augmentation_transforms(Augment::kFull, b);
  REQUIRE(full.size() == 6);
  CHECK(full == augmentation_transforms(Augment::kFull, b));  // reproducible
  const std::regex jpeg("jpeg-q([0-9]+)"), webp("webp-q([0-9]+)"), down("downscale-(0\\.[0-9]+)"),
      crop_re("crop-centre-(0\\.[0-9]+)");
  std::smatch m;
  REQUIRE(std::regex_match(full[0], m, jpeg));
  CHECK(std::stoi(m[1]) >= 65);
  CHECK(std::stoi(m[1]) <= 95);
  REQUIRE(std::regex_match(full[1], m, down));
  CHECK(std::stod(m[1]) >= 0.5);
  CHECK(std::stod(m[1]) <= 0.9);
  REQUIRE(std::regex_match(full[2], m, webp));
  REQUIRE(std::regex_match(full[3], m, crop_re));
  // One laundering copy: blur sigma 0.8..2.0, noise sigma 2..6, or a 3 x 3 median; each kind drawn
  // for some of the hashes.
  const std::regex blur_re("blur-([0-9.]+)"), noise_re("noise-([0-9.]+)");
  std::set<std::string> kinds;
  for (char c : std::string("0123456789abcdef")) {
    const std::string t = augmentation_transforms(Augment::kFull, std::string(64, c)).at(4);
    if (std::regex_match(t, m, blur_re)) {
      CHECK(std::stod(m[1]) >= 0.8);
      CHECK(std::stod(m[1]) <= 2.0);
      kinds.insert("blur");
    } else if (std::regex_match(t, m, noise_re)) {
      CHECK(std::stod(m[1]) >= 2.0);
      CHECK(std::stod(m[1]) <= 6.0);
      kinds.insert("noise");
    } else {
      CHECK(t == "median-3");
      kinds.insert("median");
    }
  }
  CHECK(kinds.size() == 3);
  REQUIRE(std::regex_match(full[5], m, std::regex("upscale-([0-9.]+)")));
  CHECK(std::stod(m[1]) >= 1.1);
  CHECK(std::stod(m[1]) <= 1.5);
  // Different files get different draws (over a few hashes, not all the same).
  std::set<std::string> qualities;
  for (char c : std::string("0123456789abcdef"))
    qualities.insert(augmentation_transforms(Augment::kLight, std::string(64, c))[0]);
  CHECK(qualities.size() > 4);
  CHECK(parse_augment("full") == Augment::kFull);
  CHECK_FALSE(parse_augment("heavy").has_value());
}

TEST_CASE("parametrised transforms do what their names say") {
  const auto read = read_file(test::sample("astronaut.png"), {});  // 512 x 512 RGB
  REQUIRE(read.ok());
  const std::vector<std::uint8_t>& bytes = *read;
  auto jpeg = apply_transform(bytes, "jpeg-q83");
  REQUIRE(jpeg.ok());
  auto decoded = decode_windows(*jpeg);
  REQUIRE(decoded.ok());
  REQUIRE(decoded->jpeg_tables.has_value());
  // The IJG quality scaling of the standard's tables (ITU-T T.81 Annex K): estimated back exactly.
  CHECK(estimate_jpeg_quality(*decoded->jpeg_tables).quality == 83);
  auto down = apply_transform(bytes, "downscale-0.72");
  REQUIRE(down.ok());
  const auto header = read_header(*down);
  REQUIRE(header.ok());
  CHECK(header->width == 369);  // round(512 * 0.72)
  CHECK(header->format == ImageFormat::kPng);
  auto cropped = apply_transform(bytes, "crop-centre-0.5");
  REQUIRE(cropped.ok());
  CHECK(read_header(*cropped)->width == 256);
  auto webp = apply_transform(bytes, "webp-q70");
  REQUIRE(webp.ok());
  CHECK(read_header(*webp)->lossy);
  CHECK_FALSE(apply_transform(bytes, "downscale-1.5").ok());  // upscaling is not a downscale
  CHECK_FALSE(apply_transform(bytes, "jpeg-q0").ok());
  CHECK_FALSE(apply_transform(bytes, "jpeg-qx").ok());
  // Noise of sigma 3 on the photo: the difference from the original (both as decoded) has a
  // standard deviation near 3 (clamping at 0 and 255 trims it a little).
  auto noisy = apply_transform(bytes, "noise-3.0");
  REQUIRE(noisy.ok());
  auto before = decode_image(bytes);
  auto after = decode_image(*noisy);
  REQUIRE(before.ok());
  REQUIRE(after.ok());
  double sum = 0.0, squares = 0.0;
  for (size_t i = 0; i < after->samples.size(); ++i) {
    const double d = after->samples[i] - before->samples[i];
    sum += d;
    squares += d * d;
  }
  const auto n = static_cast<double>(after->samples.size());
  CHECK(std::sqrt(squares / n - (sum / n) * (sum / n)) == doctest::Approx(3.0).epsilon(0.05));
  CHECK(apply_transform(bytes, "blur-1.2").ok());
  CHECK_FALSE(apply_transform(bytes, "blur-9").ok());  // outside 0.3..5
}

TEST_CASE("window pooling: the mean, or the mean of the highest third (hand-worked)") {
  const std::vector<double> m = {1.0, -2.0, 4.0, 0.5, 3.0, -1.0, 2.0};
  CHECK(pooled_margin(m, "mean") == doctest::Approx(7.5 / 7.0));
  std::vector<size_t> chosen;
  // ceil(7 / 3) = 3 windows: 4, 3 and 2.
  CHECK(pooled_margin(m, "top-third", &chosen) == doctest::Approx(3.0));
  CHECK(chosen == std::vector<size_t>{2, 4, 6});
  CHECK(pooled_margin({-0.5}, "top-third") == doctest::Approx(-0.5));
}

TEST_CASE("a window-level model scores the pooled windows; contributions are those of the chosen windows") {
  Model m;
  m.extractor_version = std::string(kExtractorVersion);
  m.schema_id = feature_schema_id();
  auto index = select_features({"spectral.decay"});
  REQUIRE(index.ok());
  m.feature_index = *index;
  m.families = {"spectral", "spectral", "spectral"};
  m.scaler.mean = {0, 0, 0};
  m.scaler.scale = {1, 1, 1};
  m.linear.weights = {1.0, 0.0, 2.0};
  m.linear.bias = -1.0;
  m.calibration = {-1.0, 0.0};
  m.thresholds = {0.9, 0.1, 0.01, 0.05, std::nullopt};
  m.instances = "windows";
  m.pooling = "top-third";
  FeatureVector x;
  x.values.assign(feature_names().size(), 0.0);
  // Three windows with margins -1 + a + 2 c: 0, 4, -2. Top third: the second window only.
  for (const auto& [a, c] : {std::pair{1.0, 0.0}, std::pair{1.0, 2.0}, std::pair{-1.0, 0.0}}) {
    std::vector<double> w(feature_names().size(), 0.0);
    w[(*index)[0]] = a;
    w[(*index)[2]] = c;
    x.windows.push_back(w);
  }
  const Score s = score(m, x);
  CHECK(s.margin == doctest::Approx(4.0));
  CHECK(s.contributions.at("spectral") == doctest::Approx(5.0));
  m.pooling = "mean";
  CHECK(score(m, x).margin == doctest::Approx((0.0 + 4.0 - 2.0) / 3.0));
  m.instances = "image";  // the image's vector (all zeros here): the bias
  CHECK(score(m, x).margin == doctest::Approx(-1.0));
  // Round trip of the learning fields.
  m.instances = "windows";
  m.features = {feature_names()[(*index)[0]], feature_names()[(*index)[1]], feature_names()[(*index)[2]]};
  const auto path = test::scratch() / "window-model.json";
  REQUIRE(save_model(m, path).ok());
  auto back = load_model(path);
  REQUIRE(back.ok());
  CHECK(back->instances == "windows");
  CHECK(back->pooling == "mean");
}

TEST_CASE("the feature cache keeps each window's vector and keys copies by (hash, transform)") {
  auto cache = FeatureCache::open(test::scratch() / "windows.sqlite");
  REQUIRE(cache.ok());
  FeatureCache::Entry e;
  e.facts.format = "png";
  e.features.values.assign(feature_names().size(), 1.0);
  e.features.windows.assign(3, std::vector<double>(feature_names().size(), 0.0));
  e.features.windows[2][5] = 7.5;
  REQUIRE((*cache)->store("abc", e).ok());
  REQUIRE((*cache)->store("abc:jpeg-q80", FeatureCache::Entry{e.facts, {e.features.values, {}}}).ok());
  const auto back = (*cache)->find("abc");
  REQUIRE(back.has_value());
  CHECK(back->features.values == e.features.values);
  CHECK(back->features.windows == e.features.windows);
  const auto copy = (*cache)->find("abc:jpeg-q80");
  REQUIRE(copy.has_value());
  CHECK(copy->features.windows.empty());
}
