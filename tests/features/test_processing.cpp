// Processing evidence and the everyday transforms, on scikit-image's astronaut photograph
// (python3-skimage, public domain) and on arrays made by the tests.
#include <doctest/doctest.h>

#include <cmath>
#include <fstream>
#include <set>

#include "residue/features/extract.hpp"
#include "residue/features/processing.hpp"
#include "residue/features/transforms.hpp"
#include "support.hpp"

using namespace residue;

namespace {

ProcessingEvidence evidence_of(const std::vector<std::uint8_t>& bytes) {
  auto e = extract_bytes(bytes);
  REQUIRE(e);
  return e->processing;
}

std::vector<std::uint8_t> transformed(const std::vector<std::uint8_t>& bytes, const std::string& name) {
  auto out = apply_transform(bytes, name);
  REQUIRE(out);
  return *out;
}

}  // namespace

TEST_CASE("dct8x8 equals scipy.fft.dctn(norm='ortho') on a block of a photograph") {
  const Image camera = test::load(test::sample("camera.png"));
  std::array<double, 64> block{};
  const auto csv = test::scratch() / "block.csv";
  std::ofstream out(csv);
  for (size_t y = 0; y < 8; ++y) {
    for (size_t x = 0; x < 8; ++x) {
      block[y * 8 + x] = camera.plane(0)[(200 + y) * static_cast<size_t>(camera.width) + 240 + x];
      out << (x ? "," : "") << block[y * 8 + x];
    }
    out << "\n";
  }
  out.close();
  const auto expected = test::numbers(test::python("applicability_reference.py", {"dct", csv.string()}));
  const auto d = dct8x8(block);
  REQUIRE(expected.size() == 64);
  for (size_t k = 0; k < 64; ++k) CHECK(d[k] == doctest::Approx(expected[k]).epsilon(1e-10).scale(1.0));
}

TEST_CASE("resampling factor candidates invert Kirchner's peak position 1/w folded into [0, 0.5]") {
  // Kirchner (2008), sec. 3: scaling by w puts the p-map peak at f = 1/w, aliased into [0, 0.5].
  for (double w : {1.1, 1.25, 1.5, 1.8, 2.5, 4.0, 0.6, 0.8, 0.9}) {
    double f = std::fmod(1.0 / w, 1.0);
    if (f > 0.5) f = 1.0 - f;
    const auto c = resampling_factor_candidates(f);
    REQUIRE(c.size() == 4);
    bool found = false;
    for (double v : c) found = found || std::fabs(v - w) < 1e-9;
    CHECK_MESSAGE(found, "w = " << w);
  }
  CHECK(resampling_factor_candidates(0.0).empty());
  CHECK(resampling_factor_candidates(0.6).empty());
}

TEST_CASE("histogram_dips counts levels emptied by double quantisation (hand-worked example)") {
  // Every second level nearly empty: the six small counts are each under 0.2 x the mean of the
  // up-to-five levels around them (e.g. level 1: 5 < 0.2 x (400+5+300+6)/4 = 35.6; level 11:
  // 1 < 0.2 x (2+80+1)/3 = 5.5), the six large ones are not (level 2: 300 > 0.2 x 182.2).
  const std::vector<double> h = {400, 5, 300, 6, 200, 4, 150, 3, 100, 2, 80, 1};
  CHECK(histogram_dips(h) == doctest::Approx(0.5));
  // A smooth geometric histogram has no dips.
  std::vector<double> smooth;
  smooth.reserve(20);
  for (int v = 0; v < 20; ++v) smooth.push_back(1000.0 * std::pow(0.85, v));
  CHECK(histogram_dips(smooth) == 0.0);
  // Too few populated levels to judge.
  CHECK(histogram_dips({100, 0, 100}) == 0.0);
}

TEST_CASE("processing evidence: an untouched photograph shows none") {
  const auto e = evidence_of(test::file_bytes(test::sample("astronaut.png")));
  CHECK_FALSE(e.quantised);
  CHECK_FALSE(e.resampling.detected);
  CHECK_FALSE(e.jpeg_quality.has_value());
  CHECK_FALSE(e.lossy_webp);
  CHECK_FALSE(e.screenshot_like);
  CHECK(e.distinct_colours > 20000);
  // The only note is libpng's about the file's known-incorrect sRGB profile (test_integrity.cpp).
  REQUIRE(e.notes.size() == 1);
  CHECK(e.notes[0] == "decoder note: libpng: iCCP: known incorrect sRGB profile");
}

TEST_CASE("processing evidence: palette PNG, lossy WebP, upscaling, JPEG quality and double JPEG") {
  const auto original = test::file_bytes(test::sample("astronaut.png"));

  const auto palette = evidence_of(transformed(original, "palette-256"));
  CHECK(palette.palette_file);
  CHECK(palette.quantised);
  CHECK(palette.distinct_colours <= 256);

  const auto webp = evidence_of(transformed(original, "webp-q80"));
  CHECK(webp.lossy_webp);
  CHECK_FALSE(webp.quantised);

  // Bicubic upscaling by 1.5: the p-map peak at 1 - 1/1.5 = 1/3 cycles/pixel (Kirchner 2008),
  // within 1.5 bins of a 256-point spectrum.
  const auto up = evidence_of(transformed(original, "upscale-1.5"));
  CHECK_MESSAGE(up.resampling.detected, "strength " << up.resampling.strength << ", "
                                                    << up.resampling.windows_agreeing << " of "
                                                    << up.resampling.windows);
  CHECK(std::fabs(up.resampling.frequency - 1.0 / 3.0) <= 1.5 / 256);
  CHECK(resampling_factor_candidates(up.resampling.frequency)[0] == doctest::Approx(1.5).epsilon(0.02));

  // IJG quality 75 read back from the tables; one compression is not double compression.
  const auto once = transformed(original, "jpeg-q75");
  const auto q75 = evidence_of(once);
  REQUIRE(q75.jpeg_quality);
  CHECK(*q75.jpeg_quality == 75);
  CHECK_FALSE(q75.double_jpeg.detected);
  // Quality 50 then 80: the second, finer quantisation leaves empty levels between multiples of
  // q1/q2 (Popescu & Farid 2004).
  const Image decoded = test::load(test::sample("astronaut.png"));
  auto first = encode_image(decoded, ImageFormat::kJpeg, 50);
  REQUIRE(first);
  auto again = decode_image(*first);
  REQUIRE(again);
  auto second = encode_image(*again, ImageFormat::kJpeg, 80);
  REQUIRE(second);
  const auto twice = evidence_of(*second);
  CHECK(twice.double_jpeg.detected);
  CHECK(twice.double_jpeg.strength > 0.25);
  CHECK(*twice.jpeg_quality == 80);
}

TEST_CASE("processing evidence reusing the families' windows equals the evidence computed alone") {
  // extract_bytes hands the windows whose p-map spectra the resampling family made to the
  // processing evidence; the families must leave them as the evidence would make them.
  const auto original = test::file_bytes(test::sample("astronaut.png"));
  for (const auto& bytes : {transformed(original, "upscale-1.5"), transformed(original, "jpeg-q75")}) {
    auto decoded = decode_windows(bytes);
    REQUIRE(decoded);
    const std::optional<QualityEstimate> quality =
        decoded->jpeg_tables ? std::optional(estimate_jpeg_quality(*decoded->jpeg_tables)) : std::nullopt;
    const auto windows = window_inputs(decoded->tiles);
    (void)extract_windows(windows, nullptr);
    for (const auto& w : windows) CHECK(w.pmap_profile_kept.size() == 129);  // made by the resampling family
    const auto shared = assess_processing(*decoded, quality, &windows);
    const auto alone = assess_processing(*decoded, quality);
    CHECK(shared.resampling.strength == alone.resampling.strength);
    CHECK(shared.resampling.frequency == alone.resampling.frequency);
    CHECK(shared.resampling.windows_agreeing == alone.resampling.windows_agreeing);
    CHECK(shared.resampling.detected == alone.resampling.detected);
    CHECK(shared.double_jpeg.strength == alone.double_jpeg.strength);
    CHECK(shared.notes == alone.notes);
  }
}

TEST_CASE("median cut keeps an image of four colours exact and caps the palette") {
  Image four = Image::zeros(64, 64, 3);
  const float colours[4][3] = {{10, 20, 30}, {200, 10, 10}, {0, 255, 0}, {90, 90, 90}};
  for (int y = 0; y < 64; ++y) {
    for (int x = 0; x < 64; ++x) {
      const int k = (y / 32) * 2 + x / 32;
      for (int c = 0; c < 3; ++c) four.plane(c)[static_cast<size_t>(y) * 64 + x] = colours[k][c];
    }
  }
  const auto q = median_cut(four, 256);
  CHECK(q.palette.size() == 4);
  for (int y = 0; y < 64; y += 7) {
    for (int x = 0; x < 64; x += 5) {
      const auto& p = q.palette[q.indices[static_cast<size_t>(y) * 64 + x]];
      const int k = (y / 32) * 2 + x / 32;
      for (int c = 0; c < 3; ++c) CHECK(p[static_cast<size_t>(c)] == colours[k][c]);
    }
  }
  const auto photo = median_cut(test::load(test::sample("astronaut.png")), 256);
  CHECK(photo.palette.size() == 256);
  CHECK(std::set<std::uint8_t>(photo.indices.begin(), photo.indices.end()).size() == 256);
}

TEST_CASE("apply_transform refuses an unknown name and keeps as-published byte for byte") {
  const auto original = test::file_bytes(test::sample("astronaut.png"));
  CHECK(transformed(original, "as-published") == original);
  auto bad = apply_transform(original, "sepia");
  REQUIRE_FALSE(bad);
  CHECK(bad.error().code == ErrorCode::kUnsupported);
  const auto half = transformed(original, "downscale-0.5");
  auto header = read_header(half);
  REQUIRE(header);
  CHECK(header->width == 256);
  CHECK(header->height == 256);
}

TEST_CASE("combed histograms and exact flat colour areas (images made by the test)") {
  // Levels doubled: 0, 2, 4, ... 254 -- every odd level empty, so within the 1-99 % range about
  // half of the levels are empty (hand count: the range spans even and odd levels alike).
  Image combed = Image::zeros(256, 256, 1);
  for (int y = 0; y < 256; ++y) {
    for (int x = 0; x < 256; ++x)
      combed.plane(0)[static_cast<size_t>(y) * 256 + x] = static_cast<float>(2 * ((x + y) % 128));
  }
  auto e = extract_image(combed);
  REQUIRE(e);
  CHECK(e->processing.histogram_gaps == doctest::Approx(0.5).epsilon(0.02));
  CHECK(e->processing.quantised);  // grey: judged by its histogram

  // A user-interface-like picture: 32 px panels of 6 exact colours with a little text-like
  // detail in one corner of each panel; lossless.
  Image ui = Image::zeros(256, 256, 3);
  const float panel[6][3] = {{240, 240, 240}, {30, 60, 120}, {200, 200, 210},
                             {250, 250, 250}, {90, 90, 90},  {20, 140, 60}};
  for (int y = 0; y < 256; ++y) {
    for (int x = 0; x < 256; ++x) {
      const int k = ((y / 32) * 8 + x / 32) % 6;
      const bool detail = (x % 32) < 6 && (y % 32) < 4 && ((x + y) % 2 == 0);
      for (int c = 0; c < 3; ++c)
        ui.plane(c)[static_cast<size_t>(y) * 256 + x] = detail ? 128.0F : panel[k][c];
    }
  }
  e = extract_image(ui);
  REQUIRE(e);
  CHECK(e->processing.flat_share > 0.9);
  CHECK(e->processing.screenshot_like);
  // A photograph has no such areas.
  CHECK(evidence_of(test::file_bytes(test::sample("astronaut.png"))).flat_share < 0.05);
}
