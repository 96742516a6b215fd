// Pixel containers shared by every layer: a decoded image and the square analysis tiles cut from it.
//
// Conventions: samples are float, planar (channel-major, then row-major), on a 0..255 scale
// whatever the stored bit depth (16-bit samples are divided by 257). Colour order is R, G, B.
// Luminance is ITU-R BT.601 luma, Y = 0.299 R + 0.587 G + 0.114 B, on the stored (gamma-encoded)
// values, as JPEG/JFIF defines it.
#pragma once

#include <cstdint>
#include <string_view>
#include <vector>

namespace residue {

enum class ImageFormat { kUnknown, kJpeg, kPng, kWebp, kTiff, kBmp };

std::string_view image_format_name(ImageFormat format);

// What a file's header says, read before any pixel is decoded.
struct ImageHeader {
  ImageFormat format = ImageFormat::kUnknown;
  int width = 0;
  int height = 0;
  int channels = 0;      // as stored, alpha included; 0 where the header does not say
  int bit_depth = 0;     // bits per sample; 0 where the header does not say
  bool palette = false;  // samples are indices into a colour table (PNG colour type 3, BMP <= 8 bit)
  bool lossy = false;    // lossy coding (JPEG, WebP "VP8 ", TIFF with JPEG compression)
};

// A whole decoded image (alpha dropped), 1 (grey) or 3 (RGB) channels.
struct Image {
  int width = 0;
  int height = 0;
  int channels = 0;
  std::vector<float> samples;  // channels * height * width

  [[nodiscard]] float* plane(int c) { return samples.data() + static_cast<size_t>(c) * width * height; }
  [[nodiscard]] const float* plane(int c) const {
    return samples.data() + static_cast<size_t>(c) * width * height;
  }
  static Image zeros(int width, int height, int channels);
};

// One square analysis window cut from an image at (x, y), never resized.
struct Tile {
  int x = 0;
  int y = 0;
  int size = 0;
  int channels = 0;
  std::vector<float> samples;  // channels * size * size

  [[nodiscard]] const float* plane(int c) const {
    return samples.data() + static_cast<size_t>(c) * size * size;
  }
  [[nodiscard]] float* plane(int c) { return samples.data() + static_cast<size_t>(c) * size * size; }
  // BT.601 luma of the tile (the grey plane itself for one channel).
  [[nodiscard]] std::vector<float> luma() const;
};

// BT.601 luma of a whole image.
std::vector<float> luma(const Image& image);

// The w x h part of `image` whose top-left corner is (x, y); the rectangle must lie inside.
Image crop(const Image& image, int x, int y, int w, int h);

}  // namespace residue
