// Decoder integrity (warnings caught, damaged files told apart from benign notes), lossy WebP's
// block transform not read as resampling, and the fine-detail measure against its definition.
// Photographs: scikit-image's samples (python3-skimage, public domain / CC0).
#include <doctest/doctest.h>
#include <zlib.h>

#include <algorithm>
#include <array>
#include <cmath>
#include <random>

#include "residue/features/extract.hpp"
#include "residue/features/processing.hpp"
#include "residue/features/transforms.hpp"
#include "support.hpp"

using namespace residue;

namespace {

// A JPEG of the astronaut with `flips` single-bit flips in its entropy-coded data, drawn with
// `seed`: the kind of damage a bad transfer does. Flips land between the end of the SOS header and
// the two bytes of the EOI marker.
std::vector<std::uint8_t> bit_flipped_jpeg(std::uint32_t seed, int flips) {
  auto bytes = encode_image(test::load(test::sample("astronaut.png")), ImageFormat::kJpeg, 90);
  REQUIRE(bytes);
  std::vector<std::uint8_t> b = *bytes;
  size_t sos = 0;
  for (size_t i = 0; i + 3 < b.size(); ++i) {
    if (b[i] == 0xFF && b[i + 1] == 0xDA) {
      sos = i;
      break;
    }
  }
  REQUIRE(sos > 0);
  const size_t start = sos + 2 + (static_cast<size_t>(b[sos + 2]) << 8 | b[sos + 3]);
  std::mt19937 random(seed);
  std::uniform_int_distribution<size_t> where(start, b.size() - 3);
  std::uniform_int_distribution<int> bit(0, 7);
  for (int k = 0; k < flips; ++k) b[where(random)] ^= static_cast<std::uint8_t>(1U << bit(random));
  return b;
}

// The fine detail of a plane as processing.hpp defines it, written out term by term.
double fine_detail_by_definition(const std::vector<float>& p, int w, int h) {
  double sum = 0.0;
  for (int y = 1; y + 1 < h; ++y) {
    for (int x = 1; x + 1 < w; ++x) {
      const auto at = [&](int dx, int dy) { return static_cast<double>(p[(y + dy) * w + x + dx]); };
      const double r = at(-1, -1) - 2 * at(0, -1) + at(1, -1) - 2 * at(-1, 0) + 4 * at(0, 0) - 2 * at(1, 0) +
                       at(-1, 1) - 2 * at(0, 1) + at(1, 1);
      sum += std::fabs(r);
    }
  }
  return std::sqrt(M_PI / 2) * sum / (6.0 * (w - 2) * (h - 2));
}

}  // namespace

TEST_CASE("libjpeg's warnings about flipped bits are caught as damage, and the file still decodes") {
  // libjpeg-turbo reports "Corrupt JPEG data: N extraneous bytes before marker 0xd9" (jerror.h,
  // JWRN_EXTRANEOUS_DATA) and decodes on. Of the seeds tried, some damage the headers enough to be
  // refused; the rest must carry a damaged warning, never silence.
  int decoded_with_damage = 0;
  for (std::uint32_t seed = 0; seed < 8; ++seed) {
    const auto bytes = bit_flipped_jpeg(seed, 20);
    auto e = extract_bytes(bytes);
    if (!e) {
      CHECK((e.error().code == ErrorCode::kCorrupt || e.error().code == ErrorCode::kTruncated));
      continue;
    }
    REQUIRE_FALSE(e->processing.decoder_warnings.empty());
    CHECK(e->processing.damaged);
    CHECK(e->processing.decoder_warnings.front().kind == "damaged");
    CHECK(e->processing.decoder_warnings.front().message.starts_with("libjpeg: Corrupt JPEG data"));
    ++decoded_with_damage;
  }
  CHECK(decoded_with_damage >= 3);
  // The same image without flips: no warning at all.
  auto clean = encode_image(test::load(test::sample("astronaut.png")), ImageFormat::kJpeg, 90);
  REQUIRE(clean);
  auto e = extract_bytes(*clean);
  REQUIRE(e);
  CHECK(e->processing.decoder_warnings.empty());
  CHECK_FALSE(e->processing.damaged);
}

TEST_CASE("a frame header naming a quantisation table past the four the standard allows is refused") {
  // ITU-T T.81 B.2.2: Tq is 0..3. libjpeg reads any byte there and checks it only when decoding
  // starts, so the header alone must not be trusted to index the tables (found by fuzz_extract).
  auto bytes = encode_image(test::load(test::sample("astronaut.png")), ImageFormat::kJpeg, 90);
  REQUIRE(bytes);
  std::vector<std::uint8_t> b = *bytes;
  size_t sof = 0;
  for (size_t i = 0; i + 1 < b.size(); ++i) {
    if (b[i] == 0xFF && b[i + 1] == 0xC0) {
      sof = i;
      break;
    }
  }
  REQUIRE(sof > 0);
  // SOF0: marker, Lf (2), P, Y (2), X (2), Nf, then per component C, H|V, Tq.
  for (const size_t component : {size_t{0}, size_t{1}}) {
    std::vector<std::uint8_t> bad = b;
    bad[sof + 10 + 3 * component + 2] = 33;
    auto e = extract_bytes(bad);
    REQUIRE_FALSE(e);
    CHECK(e.error().code == ErrorCode::kCorrupt);
    auto whole = decode_image(bad);
    CHECK_FALSE(whole);
  }
}

TEST_CASE("a quantisation table with zero steps is survived (no double-JPEG trace is read from it)") {
  // ITU-T T.81 B.2.4.1 allows steps 1..255; libjpeg accepts a 0 from a damaged table. The double
  // compression test divides by the steps, so it must say nothing rather than index with infinity
  // (found by fuzz_extract under UBSan).
  auto bytes = encode_image(test::load(test::sample("astronaut.png")), ImageFormat::kJpeg, 90);
  REQUIRE(bytes);
  std::vector<std::uint8_t> b = *bytes;
  size_t dqt = 0;
  for (size_t i = 0; i + 1 < b.size(); ++i) {
    if (b[i] == 0xFF && b[i + 1] == 0xDB) {
      dqt = i;
      break;
    }
  }
  REQUIRE(dqt > 0);
  REQUIRE((b[dqt + 4] & 0xF0) == 0);                // 8-bit steps, table 0 first
  for (int k = 1; k < 64; ++k) b[dqt + 5 + k] = 0;  // every AC step of table 0, zig-zag order
  auto e = extract_bytes(b);
  if (e) {
    CHECK_FALSE(e->processing.double_jpeg.detected);
  } else {
    CHECK(e.error().code == ErrorCode::kCorrupt);
  }
}

TEST_CASE("a BMP declaring a width or height of -2^31 is refused, not negated") {
  // BITMAPFILEHEADER (14 bytes) then BITMAPINFOHEADER (40 bytes), little-endian: width at byte 18,
  // height at 22, planes at 26, bits per pixel at 28 (Microsoft's Windows GDI documentation; layout
  // from memory). A negative height means rows stored top-down, so the header's magnitude is taken;
  // -2^31 has none in 32 bits (found by fuzz_header under UBSan; the old code negated it).
  for (const size_t field : {size_t{18}, size_t{22}}) {
    std::vector<std::uint8_t> b(64, 0);
    b[0] = 'B';
    b[1] = 'M';
    b[10] = 54;  // pixel data offset
    b[14] = 40;  // info header size
    b[18] = 4;   // width 4
    b[22] = 4;   // height 4
    b[26] = 1;   // planes
    b[28] = 24;  // bits per pixel
    b[field] = b[field + 1] = b[field + 2] = 0;
    b[field + 3] = 0x80;  // -2^31, little-endian
    auto h = read_header(b);
    REQUIRE_FALSE(h);
    CHECK(h.error().code == ErrorCode::kCorrupt);
  }
}

TEST_CASE("a PNG with a known-incorrect sRGB profile gets a note, not damage") {
  // scikit-image's chelsea.png carries the 3144-byte HP/Microsoft sRGB profile that libpng's
  // png_sRGB_checks table lists as broken; libpng warns "iCCP: known incorrect sRGB profile".
  auto e = extract_bytes(test::file_bytes(test::sample("chelsea.png")));
  REQUIRE(e);
  REQUIRE(e->processing.decoder_warnings.size() == 1);
  CHECK(e->processing.decoder_warnings[0].kind == "note");
  CHECK(e->processing.decoder_warnings[0].message == "libpng: iCCP: known incorrect sRGB profile");
  CHECK_FALSE(e->processing.damaged);
  // The whole-image decode (pictures, transforms) reads it through the same libpng path, with the
  // same pixels as the windows.
  auto whole = decode_image(test::file_bytes(test::sample("chelsea.png")));
  REQUIRE(whole);
  CHECK(whole->width == 451);
  CHECK(whole->height == 300);
}

TEST_CASE("a PNG whose text chunk fails its CRC is damaged (libpng warns and skips the chunk)") {
  // PNG specification (ISO/IEC 15948, 5.3): each chunk ends with the CRC-32 of its type and data.
  auto png = encode_image(test::load(test::sample("astronaut.png")), ImageFormat::kPng);
  REQUIRE(png);
  const std::string text = std::string("tEXt") + "Comment" + '\0' + "damaged";
  const auto bad_crc = static_cast<std::uint32_t>(crc32(0, reinterpret_cast<const Bytef*>(text.data()),
                                                        static_cast<uInt>(text.size()))) ^
                       1U;
  const auto length = static_cast<std::uint32_t>(text.size() - 4);
  std::array<std::uint8_t, 8> ends{};  // big-endian length, then the wrong CRC
  for (size_t k = 0; k < 4; ++k) {
    ends[k] = static_cast<std::uint8_t>(length >> (24 - 8 * k));
    ends[4 + k] = static_cast<std::uint8_t>(bad_crc >> (24 - 8 * k));
  }
  std::string chunk(ends.begin(), ends.begin() + 4);
  chunk += text;
  chunk.append(ends.begin() + 4, ends.end());
  std::vector<std::uint8_t> bytes;  // signature and IHDR (33 bytes), the chunk, the rest
  bytes.reserve(png->size() + chunk.size());
  for (size_t i = 0; i < png->size(); ++i) {
    if (i == 33) {
      for (const auto b : chunk) bytes.push_back(b);
    }
    bytes.push_back((*png)[i]);
  }
  auto e = extract_bytes(bytes);
  REQUIRE(e);
  REQUIRE(e->processing.decoder_warnings.size() == 1);
  CHECK(e->processing.decoder_warnings[0].kind == "damaged");
  CHECK(e->processing.decoder_warnings[0].message == "libpng: tEXt: CRC error");
  CHECK(e->processing.damaged);
}

TEST_CASE("warning kinds: libpng's chunk prefixes, and words for decoders without codes") {
  CHECK(png_warning_kind("iCCP: known incorrect sRGB profile") == "note");
  CHECK(png_warning_kind("tEXt: CRC error") == "damaged");  // a bad CRC is damage, even in text
  CHECK(png_warning_kind("IDAT: Too much image data") == "damaged");
  CHECK(png_warning_kind("Extra compressed data") == "damaged");
  CHECK(warning_kind_from_words("TIFFReadDirectory: Unknown field with tag 50341 (0xc4a5) encountered") ==
        "note");
  CHECK(warning_kind_from_words("LZWDecode: Strip 3 not terminated with EOI code") == "damaged");
  CHECK(warning_kind_from_words("Premature EOF") == "damaged");
}

TEST_CASE("at most kMaxDecoderWarnings are kept, and damage is never crowded out by notes") {
  std::vector<DecoderWarning> w;
  for (size_t i = 0; i < 3 * kMaxDecoderWarnings; ++i)
    add_decoder_warning(w, "note", "note " + std::to_string(i));
  add_decoder_warning(w, "note", "note 0");  // repeats are kept once
  CHECK(w.size() == kMaxDecoderWarnings);
  CHECK_FALSE(damaged(w));
  add_decoder_warning(w, "damaged", "libjpeg: Corrupt JPEG data: bad Huffman code");
  CHECK(w.size() == kMaxDecoderWarnings);
  CHECK(damaged(w));
}

TEST_CASE("lossy WebP of unscaled photographs claims no resampling") {
  // libwebp's lossy coder transforms 4 x 4 blocks in 16 x 16 macroblocks: periodic energy at
  // 1/4 cycles/pixel, which once read as "scaled by about 1.33, 0.80 or 4.00".
  for (const char* name : {"astronaut.png", "rocket.jpg", "ihc.png", "chelsea.png"}) {
    const Image photo = test::load(test::sample(name));
    for (int quality : {50, 75, 90}) {
      CAPTURE(name);
      CAPTURE(quality);
      auto webp = encode_image(photo, ImageFormat::kWebp, quality);
      REQUIRE(webp);
      auto e = extract_bytes(*webp);
      REQUIRE(e);
      CHECK(e->processing.lossy_webp);
      CHECK_FALSE(e->processing.resampling.detected);
    }
  }
}

TEST_CASE("fine detail against its definition: flat, ramp, white noise of known sigma, blurred noise") {
  const int n = 256;
  std::vector<float> flat(static_cast<size_t>(n) * n, 117.0F);
  CHECK(fine_detail(flat.data(), n, n) == 0.0);
  std::vector<float> ramp(flat.size());
  for (int y = 0; y < n; ++y)
    for (int x = 0; x < n; ++x) ramp[static_cast<size_t>(y) * n + x] = 0.3F * x + 0.2F * y;
  CHECK(fine_detail(ramp.data(), n, n) == doctest::Approx(0.0).scale(1.0).epsilon(1e-4));

  // i.i.d. Gaussian noise of sigma 5: N * I is Gaussian with standard deviation 6 sigma
  // (sum of N's squared taps = 36), and E|X| = sqrt(2 / pi) sd, so the estimate is sigma.
  // Standard error: neighbouring residuals are correlated; 2 % is over ten standard errors here.
  std::mt19937 random(7);
  std::normal_distribution<float> draw(0.0F, 5.0F);
  std::vector<float> noise(flat.size());
  for (auto& v : noise) v = 128.0F + draw(random);
  CHECK(fine_detail(noise.data(), n, n) == doctest::Approx(5.0).epsilon(0.02));
  CHECK(fine_detail(noise.data(), n, n) == doctest::Approx(fine_detail_by_definition(noise, n, n))
                                               .epsilon(1e-6));  // float residuals against double sums

  // Noise averaged over 2 x 2 neighbours: N * b = (N * k) * w with k the 2 x 2 box of 1/4, so
  // the estimate is sigma ||N * k||_2 / 6. N * k has taps (1/4) [1 -1 -1 1; -1 1 1 -1; -1 1 1 -1;
  // 1 -1 -1 1], whose squared sum is 16 / 16 = 1: the estimate is sigma / 6.
  const int m = n - 1;
  std::vector<float> blurred(static_cast<size_t>(m) * m);
  for (int y = 0; y < m; ++y) {
    for (int x = 0; x < m; ++x) {
      const size_t i = static_cast<size_t>(y) * n + x;
      blurred[static_cast<size_t>(y) * m + x] =
          0.25F * (noise[i] + noise[i + 1] + noise[i + n] + noise[i + n + 1]);
    }
  }
  CHECK(fine_detail(blurred.data(), m, m) == doctest::Approx(5.0 / 6.0).epsilon(0.03));
  CHECK(fine_detail(blurred.data(), m, m) == doctest::Approx(fine_detail_by_definition(blurred, m, m))
                                                 .epsilon(1e-6));  // float residuals against double sums
}

TEST_CASE("fine detail falls under blur, a median filter and strong JPEG, and the evidence carries it") {
  const auto bytes = test::file_bytes(test::sample("astronaut.png"));
  auto original = extract_bytes(bytes);
  REQUIRE(original);
  const double before = original->processing.fine_detail;
  CHECK(before > 1.0);
  {
    // The evidence takes each window's value from the noise family's shared Immerkaer level: it
    // must be fine_detail() of the window's luma, median over the windows.
    auto decoded = decode_windows(bytes);
    REQUIRE(decoded);
    std::vector<double> per_window;
    for (const auto& tile : decoded->tiles) {
      const auto luma = tile.luma();
      per_window.push_back(fine_detail(luma.data(), tile.size, tile.size));
    }
    REQUIRE(per_window.size() == 4);
    std::sort(per_window.begin(), per_window.end());
    CHECK(before == per_window[2]);  // the median of an even count is nth_element's upper middle
  }
  for (const char* name : {"blur-1.5", "median-3", "jpeg-q50"}) {
    CAPTURE(name);
    auto processed = apply_transform(bytes, name);
    REQUIRE(processed);
    auto e = extract_bytes(*processed);
    REQUIRE(e);
    CHECK(e->processing.fine_detail < 0.8 * before);
  }
  auto noisy = apply_transform(bytes, "noise-4");
  REQUIRE(noisy);
  auto e = extract_bytes(*noisy);
  REQUIRE(e);
  CHECK(e->processing.fine_detail > before);  // grain adds fine detail: not a weakened image
}
