// Guarded decode: file bytes -> header -> limits -> pixels of the analysis windows.
//
// Formats: JPEG (libjpeg-turbo, decoding only the rows and columns the windows need), PNG, WebP,
// TIFF and BMP (OpenCV); 8- and 16-bit; grey, grey+alpha, RGB, RGBA (alpha dropped and said so).
// The pixel count is checked from the header before any pixel buffer is allocated, so a
// decompression bomb is refused cheaply. Every failure is a typed Error; nothing throws or aborts.
// Thread safety: all functions are reentrant.
#pragma once

#include <array>
#include <cstdint>
#include <filesystem>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "residue/features/image.hpp"
#include "residue/features/status.hpp"
#include "residue/features/windows.hpp"

namespace residue {

struct DecodeLimits {
  std::uint64_t max_file_bytes = 200ULL << 20;  // 200 MiB: the file is held in memory (docs/reliability.md)
  std::uint64_t max_pixels = 120'000'000;       // 120 megapixels, from the header
  // JPEG, PNG, WebP and common TIFFs are decoded window by window (memory follows the windows);
  // BMP and the rarer TIFF layouts are decoded whole, about 20 bytes a pixel at the peak, so their
  // limit is lower: it keeps peak memory near 300 MB (docs/reliability.md).
  std::uint64_t max_whole_decode_pixels = 12'000'000;
};

// JPEG quantisation tables as stored in the file, natural (row-major) coefficient order.
struct JpegQuantTables {
  std::array<int, 64> luma{};
  std::optional<std::array<int, 64>> chroma;
};

// A message a decoder gave while it went on decoding. libjpeg, libpng and libtiff report recoverable
// problems this way and return pixels anyway; none of them reaches stderr (decode.cpp).
struct DecoderWarning {
  // "damaged": the data are damaged and the pixels may not be the ones written (corrupt entropy
  // data, extraneous bytes, a bad CRC, a premature end): the file must not be judged.
  // "note": benign (a known-incorrect sRGB profile, an unknown tag): kept, changes nothing.
  std::string kind;
  std::string message;  // the library's name, then its own words ("libjpeg: Corrupt JPEG data: ...")
};

// Distinct warnings kept per file (a damaged one always finds a place).
inline constexpr size_t kMaxDecoderWarnings = 16;

// Whether any warning says the data are damaged.
bool damaged(const std::vector<DecoderWarning>& warnings);

// The kind of a warning from its words, for decoders without message codes (libtiff): "damaged"
// when they speak of corrupt, truncated, premature or extraneous data, a bad CRC or code.
std::string warning_kind_from_words(const std::string& message);

// The kind of a libpng warning: "note" for a problem in an ancillary chunk (libpng prefixes the
// chunk's name, lower-case first letter: "iCCP: known incorrect sRGB profile"), except a CRC error;
// "damaged" for anything about the image data or a critical chunk.
std::string png_warning_kind(const std::string& message);

// Appends a warning, keeping at most kMaxDecoderWarnings distinct ones.
void add_decoder_warning(std::vector<DecoderWarning>& warnings, const std::string& kind,
                         const std::string& message);

// The analysis input of one file.
struct DecodedWindows {
  ImageHeader header;
  int channels = 0;            // analysed channels: 1 (grey) or 3 (RGB)
  bool alpha_dropped = false;  // the file had an alpha channel, ignored by the analysis
  WindowLayout layout;
  std::vector<Tile> tiles;
  std::optional<JpegQuantTables> jpeg_tables;    // JPEG files only
  std::uint64_t decoded_rows = 0;                // image rows actually decoded (JPEG skips the others)
  std::vector<DecoderWarning> decoder_warnings;  // what the decoder reported and decoded past
};

// Reads a whole file, refusing one over the size limit before reading it.
Result<std::vector<std::uint8_t>> read_file(const std::filesystem::path& path,
                                            const DecodeLimits& limits = {});

// Identifies the container from its signature bytes.
ImageFormat sniff_format(std::span<const std::uint8_t> bytes);

// Parses just the header (size, channels, bit depth) without decoding pixels.
Result<ImageHeader> read_header(std::span<const std::uint8_t> bytes);

// Decodes the whole image (alpha dropped). For pictures and tests; analysis uses decode_windows.
Result<Image> decode_image(std::span<const std::uint8_t> bytes, const DecodeLimits& limits = {});

// Decodes a picture for fingerprints and thumbnails: a JPEG at 1/8 scale through libjpeg's DCT
// scaling (fast), other formats whole. Not for analysis: scaling erases the traces.
Result<Image> decode_preview(std::span<const std::uint8_t> bytes, const DecodeLimits& limits = {});

// Decodes the pixels of the planned analysis windows. With `skip_unused_rows` (the default) a
// JPEG decodes only the scanlines and column span that the windows cover.
Result<DecodedWindows> decode_windows(std::span<const std::uint8_t> bytes, const DecodeLimits& limits = {},
                                      const WindowPolicy& policy = {}, bool skip_unused_rows = true);

// The whole image decoded straight to 8-bit interleaved colour by libjpeg-turbo or libpng (through
// OpenCV's imdecode, IMREAD_COLOR), as a plain decoder such as Pillow does it: no float planes.
// Returns the number of bytes decoded. The reference `residue bench` compares the analysis with.
Result<std::size_t> decode_plain_8bit(std::span<const std::uint8_t> bytes);

// Encodes an image (values rounded and clamped to 0..255, 8-bit) as JPEG at `quality` (IJG
// scale, 4:2:0 chroma as libjpeg's default) or as PNG. For the demo, benchmarks and tests.
Result<std::vector<std::uint8_t>> encode_image(const Image& image, ImageFormat format, int quality = 90);

}  // namespace residue
