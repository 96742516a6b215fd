// Guarded decode: formats, bit depths, alpha, limits and typed errors. Test files are written by
// tests/reference/make_files.py with Pillow (Debian python3-pil) from scikit-image samples.
#include <doctest/doctest.h>

#include <chrono>
#include <cmath>

#include "residue/features/decode.hpp"
#include "support.hpp"

using namespace residue;

namespace {

const std::filesystem::path& files() {
  static const std::filesystem::path dir = [] {
    const auto d = test::scratch() / "files";
    test::python("make_files.py", {d.string()});
    return d;
  }();
  return dir;
}

Result<DecodedWindows> decode_path(const std::string& name, const DecodeLimits& limits = {}) {
  auto bytes = read_file(files() / name, limits);
  if (!bytes) return bytes.error();
  return decode_windows(*bytes, limits);
}

ErrorCode code_of(const std::string& name, const DecodeLimits& limits = {}) {
  auto r = decode_path(name, limits);
  REQUIRE_FALSE(r.ok());
  return r.error().code;
}

double max_abs_diff(const std::vector<float>& a, const std::vector<float>& b) {
  REQUIRE(a.size() == b.size());
  double m = 0.0;
  for (size_t i = 0; i < a.size(); ++i) m = std::max(m, static_cast<double>(std::fabs(a[i] - b[i])));
  return m;
}

}  // namespace

TEST_CASE("every supported container decodes to the same pixels as the lossless PNG") {
  auto png = decode_path("coffee.png");
  REQUIRE(png.ok());
  CHECK(png->header.format == ImageFormat::kPng);
  CHECK(png->header.width == 600);
  CHECK(png->header.height == 400);
  CHECK(png->channels == 3);
  for (const char* name : {"coffee.webp", "coffee.tif", "coffee.bmp"}) {
    CAPTURE(name);
    auto other = decode_path(name);
    REQUIRE(other.ok());
    CHECK(other->header.width == 600);
    CHECK(other->header.height == 400);
    REQUIRE(other->tiles.size() == png->tiles.size());
    CHECK(max_abs_diff(other->tiles[0].samples, png->tiles[0].samples) == 0.0);  // lossless
  }
  auto webp = decode_path("coffee.webp");
  CHECK(webp->header.format == ImageFormat::kWebp);
}

TEST_CASE("16-bit samples are scaled by 1/257 onto the 8-bit scale; grey stays one channel") {
  auto grey = decode_path("camera_grey.png");
  auto deep = decode_path("camera_16bit.png");
  REQUIRE(grey.ok());
  REQUIRE(deep.ok());
  CHECK(deep->header.bit_depth == 16);
  CHECK(grey->header.bit_depth == 8);
  CHECK(deep->channels == 1);
  CHECK(max_abs_diff(deep->tiles[0].samples, grey->tiles[0].samples) < 1e-4);
}

TEST_CASE("alpha is dropped and said so; colour equals the image without alpha") {
  auto rgba = decode_path("astronaut_rgba.png");
  auto rgb = decode_path("astronaut.png");
  REQUIRE(rgba.ok());
  REQUIRE(rgb.ok());
  CHECK(rgba->alpha_dropped);
  CHECK_FALSE(rgb->alpha_dropped);
  CHECK(rgba->channels == 3);
  CHECK(max_abs_diff(rgba->tiles[0].samples, rgb->tiles[0].samples) == 0.0);
}

TEST_CASE("JPEG window decode (skipped rows, cropped columns) equals decoding everything") {
  auto bytes = read_file(files() / "hubble_q90.jpg");
  REQUIRE(bytes.ok());
  auto partial = decode_windows(*bytes, {}, {}, true);
  auto full = decode_windows(*bytes, {}, {}, false);
  REQUIRE(partial.ok());
  REQUIRE(full.ok());
  CHECK(partial->layout.origins.size() == 9);
  CHECK(partial->decoded_rows == 3 * 256);  // three bands of windows out of 872 rows
  CHECK(full->decoded_rows == 872);
  REQUIRE(partial->tiles.size() == full->tiles.size());
  for (size_t t = 0; t < full->tiles.size(); ++t) {
    CAPTURE(t);
    CHECK(max_abs_diff(partial->tiles[t].samples, full->tiles[t].samples) == 0.0);
  }
}

TEST_CASE("bad input gives the right typed error") {
  CHECK(code_of("empty.jpg") == ErrorCode::kEmpty);
  CHECK(code_of("truncated_half.jpg") == ErrorCode::kTruncated);
  CHECK(code_of("truncated_tail.jpg") == ErrorCode::kTruncated);
  CHECK(code_of("truncated_header.jpg") == ErrorCode::kTruncated);
  CHECK(code_of("truncated_half.png") == ErrorCode::kTruncated);
  CHECK(code_of("random.png") == ErrorCode::kNotAnImage);
  CHECK(code_of("text.jpg") == ErrorCode::kNotAnImage);
  CHECK(code_of("tiny_10x10.png") == ErrorCode::kTooSmall);
  CHECK(code_of("no_such_file.png") == ErrorCode::kUnreadable);
  CHECK(code_of(".") == ErrorCode::kUnreadable);  // a folder
  DecodeLimits small_files;
  small_files.max_file_bytes = 1000;
  CHECK(code_of("coffee.png", small_files) == ErrorCode::kTooLarge);
}

TEST_CASE("a PNG header claiming 100000 x 100000 pixels is refused from the header alone") {
  auto bytes = read_file(files() / "bomb_100000x100000.png");
  REQUIRE(bytes.ok());
  auto header = read_header(*bytes);
  REQUIRE(header.ok());
  CHECK(header->width == 100000);
  CHECK(header->height == 100000);
  // The file holds no pixel data: only the header check can say "too large" (a decoder would say
  // corrupt), and 10^10 RGB floats (120 GB) were never allocated.
  auto r = decode_windows(*bytes);
  REQUIRE_FALSE(r.ok());
  CHECK(r.error().code == ErrorCode::kTooLarge);
  CHECK(r.error().message.find("refused before decoding") != std::string::npos);
}

TEST_CASE("scikit-image's own truncated.jpg is reported as truncated") {
  auto bytes = read_file(test::sample("truncated.jpg"));
  REQUIRE(bytes.ok());
  auto r = decode_windows(*bytes);
  REQUIRE_FALSE(r.ok());
  CHECK(r.error().code == ErrorCode::kTruncated);
}

TEST_CASE("a thumbnail smaller than the standard window gets the largest window that fits") {
  auto r = decode_path("thumb_150x100.png");
  REQUIRE(r.ok());
  CHECK(r->layout.reduced);
  CHECK(r->layout.size == 64);
  CHECK(r->tiles.size() == 2);  // 150 px holds two 64 px windows side by side, 100 px one
}
