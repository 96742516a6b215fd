// Declared provenance: IPTC digital source types (IPTC NewsCodes vocabulary "digitalsourcetype"),
// C2PA manifest presence (C2PA specification: JUMBF "c2pa" box in JPEG APP11, PNG chunk "caBX"),
// PNG text chunks with generation settings. Files are made here, labelled as such.
#include <doctest/doctest.h>
#include <zlib.h>

#include "residue/features/decode.hpp"
#include "residue/features/metadata.hpp"
#include "support.hpp"

using namespace residue;

namespace {

std::vector<std::uint8_t> small_png() {
  Image image = Image::zeros(8, 8, 3);
  for (size_t i = 0; i < image.samples.size(); ++i) image.samples[i] = static_cast<float>(i % 251);
  return encode_image(image, ImageFormat::kPng).value();
}

// Inserts a chunk right after IHDR (8-byte signature + 25-byte IHDR chunk), CRC per ISO 15948.
std::vector<std::uint8_t> with_png_chunk(std::vector<std::uint8_t> png, const std::string& type,
                                         const std::string& data) {
  const auto n = static_cast<std::uint32_t>(data.size());
  const std::uint8_t length[4] = {static_cast<std::uint8_t>(n >> 24), static_cast<std::uint8_t>(n >> 16),
                                  static_cast<std::uint8_t>(n >> 8), static_cast<std::uint8_t>(n)};
  std::vector<std::uint8_t> chunk(std::begin(length), std::end(length));
  chunk.insert(chunk.end(), type.begin(), type.end());
  chunk.insert(chunk.end(), data.begin(), data.end());
  const uLong crc = crc32(0, chunk.data() + 4, static_cast<uInt>(chunk.size() - 4));
  const std::uint8_t check[4] = {static_cast<std::uint8_t>(crc >> 24), static_cast<std::uint8_t>(crc >> 16),
                                 static_cast<std::uint8_t>(crc >> 8), static_cast<std::uint8_t>(crc)};
  chunk.insert(chunk.end(), std::begin(check), std::end(check));
  png.insert(png.begin() + 33, chunk.begin(), chunk.end());
  return png;
}

}  // namespace

TEST_CASE("the IPTC digital source types that declare generation") {
  CHECK(declares_generated("trainedAlgorithmicMedia"));
  CHECK(declares_generated("compositeWithTrainedAlgorithmicMedia"));
  CHECK(declares_generated("algorithmicMedia"));
  CHECK(declares_generated("compositeSynthetic"));
  CHECK_FALSE(declares_generated("digitalCapture"));
  CHECK_FALSE(declares_generated("negativeFilm"));
  CHECK_FALSE(declares_generated(""));
}

TEST_CASE("an XMP digital source type written with exiv2 is read back as its NewsCodes term") {
  const auto tagged = with_digital_source_type(small_png(), "trainedAlgorithmicMedia");
  const DeclaredMetadata m = read_metadata(tagged);
  CHECK(m.readable);
  CHECK(m.has_xmp);
  CHECK(m.digital_source_type == "trainedAlgorithmicMedia");
  CHECK(read_metadata(small_png()).digital_source_type.empty());
}

TEST_CASE("PNG text chunks with generation settings are noticed; ordinary text is not") {
  const auto settings = with_png_chunk(small_png(), "tEXt", std::string("parameters\0a cat\nSteps: 20", 26));
  CHECK(read_metadata(settings).generation_text);
  const auto plain = with_png_chunk(small_png(), "tEXt", std::string("Title\0Harbour at noon", 21));
  CHECK_FALSE(read_metadata(plain).generation_text);
}

TEST_CASE("C2PA manifest presence in PNG (caBX) and JPEG (APP11 JUMBF)") {
  CHECK(read_metadata(with_png_chunk(small_png(), "caBX", "....jumb....c2pa")).c2pa_manifest);
  CHECK_FALSE(read_metadata(small_png()).c2pa_manifest);
  Image image = Image::zeros(16, 16, 3);
  auto jpeg = encode_image(image, ImageFormat::kJpeg, 90).value();
  CHECK_FALSE(read_metadata(jpeg).c2pa_manifest);
  // APP11 segment after SOI: FF EB, length, "JP" common identifier, then a JUMBF box "jumb" with
  // a description box labelled "c2pa" (the layout of C2PA's JPEG embedding).
  static constexpr char kPayload[] = "JP\0\x02\0\0\0\x01\0\0\0\x20jumb\0\0\0\x18jumdc2pa";
  const std::string payload(kPayload, sizeof kPayload - 1);
  std::vector<std::uint8_t> segment = {0xFF, 0xEB, 0, static_cast<std::uint8_t>(payload.size() + 2)};
  segment.insert(segment.end(), payload.begin(), payload.end());
  jpeg.insert(jpeg.begin() + 2, segment.begin(), segment.end());
  CHECK(read_metadata(jpeg).c2pa_manifest);
  CHECK(decode_image(jpeg).ok());  // the extra segment does not disturb decoding
}
