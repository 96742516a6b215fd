// Private adapters: the only places that speak libjpeg, OpenCV and FFTW.
#pragma once

#include <array>
#include <optional>
#include <span>

#include "residue/features/decode.hpp"

namespace residue::detail {

struct JpegOutput {
  Image full;               // filled when no layout is given
  std::vector<Tile> tiles;  // filled when a layout is given
  JpegQuantTables tables;
  std::uint64_t decoded_rows = 0;
  std::vector<DecoderWarning> warnings;
};

// Decodes a JPEG with libjpeg-turbo. With a layout, only the scanlines the windows cover are
// decoded (others skipped) and only the column span they cover (cropped scanlines).
// Without a layout, `scale_denominator` (1, 2, 4 or 8) decodes a reduced image with libjpeg's
// DCT scaling, for previews and fingerprints.
Result<JpegOutput> decode_jpeg(std::span<const std::uint8_t> bytes, const DecodeLimits& limits,
                               const WindowLayout* layout, int scale_denominator = 1);

struct WindowPixels {
  std::vector<Tile> tiles;
  int channels = 0;
  bool alpha_dropped = false;
  std::uint64_t decoded_rows = 0;
  std::vector<DecoderWarning> warnings;
};

// Decodes a PNG with libpng row by row, keeping only the windows of `layout`: memory is one row
// plus the windows (interlaced images: the rows the windows cover), not the image. The pixels equal
// decode_with_opencv's.
Result<WindowPixels> decode_png_tiles(std::span<const std::uint8_t> bytes, const WindowLayout& layout);

// Decodes a whole PNG with libpng (as decode_with_opencv would, alpha dropped), its warnings caught
// rather than printed.
struct PngImage {
  Image image;
  bool alpha_dropped = false;
  std::vector<DecoderWarning> warnings;
};
Result<PngImage> decode_png_image(std::span<const std::uint8_t> bytes);

// Decodes the bands of a WebP that hold windows, each with libwebp's cropping (rows above a band
// are decoded again for each band; memory is the bands, not the image). The pixels equal
// decode_with_opencv's. Lossless WebP above 50 MP is refused (its decoder holds the whole image).
Result<WindowPixels> decode_webp_tiles(std::span<const std::uint8_t> bytes, const WindowLayout& layout);

// Reads a TIFF scanline by scanline into the windows of `layout` when it is stored in a common
// layout (contiguous 8- or 16-bit unsigned grey or RGB[A], strips, top row first); std::nullopt for
// the others, which the caller decodes whole. The pixels equal decode_with_opencv's.
Result<std::optional<WindowPixels>> decode_tiff_tiles(std::span<const std::uint8_t> bytes,
                                                      const WindowLayout& layout);

// Decodes PNG, WebP, TIFF and BMP with OpenCV's imgcodecs; drops alpha and reports it.
Result<Image> decode_with_opencv(std::span<const std::uint8_t> bytes, const ImageHeader& header,
                                 bool* alpha_dropped);

// The whole image straight to 8-bit BGR (imdecode, IMREAD_COLOR): the plain-decoder reference.
Result<std::size_t> decode_plain_8bit(std::span<const std::uint8_t> bytes);

// Encodes with OpenCV's imgcodecs (libjpeg-turbo, libpng).
Result<std::vector<std::uint8_t>> encode(const Image& image, ImageFormat format, int quality);

enum class ResizeFilter { kArea, kBilinear, kBicubic };
// Resampling with OpenCV's resize (INTER_AREA, INTER_LINEAR, INTER_CUBIC), per plane.
Image resize(const Image& image, int width, int height, ResizeFilter filter);
// Gaussian blur with standard deviation `sigma` px (OpenCV GaussianBlur, reflected borders).
Image gaussian_blur(const Image& image, double sigma);

// A palette PNG (colour type 3, 8-bit indices) through libpng: `indices` width x height,
// `palette` up to 256 RGB triples.
Result<std::vector<std::uint8_t>> encode_palette_png(int width, int height,
                                                     const std::vector<std::uint8_t>& indices,
                                                     const std::vector<std::array<std::uint8_t, 3>>& palette);

// 3 x 3 median filter with replicated borders (OpenCV medianBlur), in place of a copy.
void median3(const float* src, float* dst, int width, int height);

}  // namespace residue::detail
