// Guarded decode: formats, bit depths, alpha, limits and typed errors. Test files are written by
// tests/reference/make_files.py with Pillow (Debian python3-pil) from scikit-image samples.
#include <doctest/doctest.h>

#include <chrono>
#include <cmath>

#include "residue/features/decode.hpp"
#include "residue/features/windows.hpp"
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

// Decodes `name` window by window and whole (OpenCV's imdecode, the reference) and checks the
// windows hold the same pixels: 8-bit exactly, 16-bit within a float step at 255.
void check_same_as_whole_decode(const std::string& name, bool alpha) {
  CAPTURE(name);
  auto bytes = read_file(files() / name);
  REQUIRE(bytes.ok());
  auto windows = decode_windows(*bytes);
  REQUIRE(windows.ok());
  // Not decode_image: for PNG it shares our libpng reader with the windows (decode.cpp).
  const Image reference_image = test::opencv_reference(*bytes);
  const Image* whole = &reference_image;
  CHECK(windows->alpha_dropped == alpha);
  CHECK(windows->channels == whole->channels);
  const double tolerance = windows->header.bit_depth == 16 ? 3e-5 : 0.0;
  const auto reference = cut_tiles(*whole, windows->layout);
  REQUIRE(reference.size() == windows->tiles.size());
  for (size_t t = 0; t < reference.size(); ++t) {
    CAPTURE(t);
    CHECK(max_abs_diff(windows->tiles[t].samples, reference[t].samples) <= tolerance);
  }
  // The whole-image decode (pictures, transforms, augmented copies) against the same reference.
  auto ours = decode_image(*bytes);
  REQUIRE(ours.ok());
  REQUIRE(ours->channels == whole->channels);
  CHECK(max_abs_diff(ours->samples, whole->samples) <= tolerance);
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

TEST_CASE("PNG windows decoded row by row equal OpenCV's whole-image decode, every colour type and depth") {
  // The row-by-row libpng decoder keeps only the windows; OpenCV's imdecode (the reference, and
  // the decoder it replaced for windows) decodes everything. Files: tests/reference/make_files.py,
  // some written byte by byte from the PNG specification (16-bit colour, Adam7 interlacing).
  const std::pair<const char*, bool> cases[] = {
      {"coffee.png", false},           {"camera_grey.png", false},     {"camera_16bit.png", false},
      {"astronaut_rgba.png", true},    {"png_palette.png", false},     {"png_palette_trns.png", true},
      {"png_grey1.png", false},        {"png_rgb16.png", false},       {"png_rgb16_adam7.png", false},
      {"png_rgb8_adam7.png", false},   {"png_grey_alpha16.png", true}, {"png_grey_trns.png", true},
      {"png_rgb8_257x301.png", false}, {"thumb_150x100.png", false}};
  for (const auto& [file, alpha] : cases) check_same_as_whole_decode(file, alpha);
  // Interlacing changes the order of the bytes, not the pixels.
  auto plain = decode_path("png_rgb16.png");
  auto adam7 = decode_path("png_rgb16_adam7.png");
  REQUIRE(plain.ok());
  REQUIRE(adam7.ok());
  CHECK(max_abs_diff(plain->tiles[0].samples, adam7->tiles[0].samples) == 0.0);
}

TEST_CASE("WebP windows decoded band by band equal OpenCV's whole-image decode") {
  // Lossy (nine windows in three bands, each band cropped by libwebp), lossy with alpha, an odd
  // size, and lossless. Reference: OpenCV's imdecode of the whole image.
  const std::pair<const char*, bool> cases[] = {{"hubble_q80.webp", false},
                                                {"hubble_alpha_q80.webp", true},
                                                {"webp_257x301_q90.webp", false},
                                                {"coffee.webp", false}};
  for (const auto& [file, alpha] : cases) check_same_as_whole_decode(file, alpha);
}

TEST_CASE("TIFF windows read scanline by scanline equal OpenCV's whole-image decode") {
  // Common layouts are read scanline by scanline through libtiff; the rarer ones (grey + alpha,
  // 1-bit, palette, JPEG-compressed YCbCr) are decoded whole by OpenCV, the reference for all.
  for (const char* file : {"coffee.tif", "hubble.tif", "tif_grey16.tif", "tif_lzw.tif", "tif_jpeg.tif",
                           "tif_grey_alpha.tif", "tif_1bit.tif", "tif_palette.tif"}) {
    check_same_as_whole_decode(file, false);
  }
  // RGBA differs from OpenCV on purpose: OpenCV reads it through libtiff's RGBA interface, which
  // premultiplies unassociated alpha (colour x alpha / 255); we keep the stored colour, as for PNG
  // and WebP. Reference: the same pixels written as PNG.
  auto rgba = decode_path("tif_rgba.tif");
  auto same = decode_path("png_rgb8_adam7.png");
  REQUIRE(rgba.ok());
  REQUIRE(same.ok());
  CHECK(rgba->alpha_dropped);
  CHECK(max_abs_diff(rgba->tiles[0].samples, same->tiles[0].samples) == 0.0);
  // Decoded whole, a rarer layout has the smaller pixel limit.
  DecodeLimits small;
  small.max_whole_decode_pixels = 50'000;
  CHECK(code_of("tif_palette.tif", small) == ErrorCode::kTooLarge);
  CHECK(decode_path("tif_lzw.tif", small).ok());  // read by scanline: the smaller limit does not apply
}

TEST_CASE("inputs the fuzz targets found, kept as regressions (run under the sanitizers in CI)") {
  // fuzz_header, 2026-12-03: a 30-byte VP8X WebP; the canvas height was read as 32 bits at offset
  // 27, one byte past the end. It is 24 bits (RFC 9649, section 2.7).
  const std::vector<std::uint8_t> vp8x = {0x52, 0x49, 0x46, 0x46, 0x76, 0x0e, 0x02, 0x00, 0x57, 0x45,
                                          0x42, 0x50, 0x56, 0x50, 0x38, 0x58, 0x0a, 0xd4, 0x48, 0x43,
                                          0x32, 0x0f, 0xc1, 0x73, 0x75, 0x41, 0xf9, 0xf8, 0x00, 0x23};
  auto h = read_header(vp8x);
  REQUIRE(h.ok());
  CHECK(h->width == 0xf94175 + 1);   // bytes 24-26: 75 41 f9, little-endian
  CHECK(h->height == 0x2300f8 + 1);  // bytes 27-29: f8 00 23
  CHECK_FALSE(decode_windows(vp8x).ok());
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

TEST_CASE("the plain 8-bit reference decode (residue bench) decodes every pixel to 8-bit colour") {
  // Pillow (Debian python3-pil) wrote these files: coffee is 600 x 400, camera 512 x 512 grey.
  for (const auto& [name, bytes_decoded] : {std::pair<std::string, std::size_t>{"coffee.png", 600 * 400 * 3},
                                            {"coffee_q90.jpg", 600 * 400 * 3},
                                            {"camera_grey.png", 512 * 512 * 3}}) {
    CAPTURE(name);
    auto bytes = read_file(files() / name);
    REQUIRE(bytes.ok());
    auto decoded = decode_plain_8bit(*bytes);
    REQUIRE(decoded.ok());
    CHECK(*decoded == bytes_decoded);
  }
  auto garbage = read_file(files() / "random.png");
  REQUIRE(garbage.ok());
  CHECK_FALSE(decode_plain_8bit(*garbage).ok());
}
