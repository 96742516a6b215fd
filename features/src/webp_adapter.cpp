// libwebp adapter: decodes only the bands of a WebP that hold analysis windows, each through
// libwebp's cropping, so that memory follows the windows, not the image.
#include <webp/decode.h>

#include <algorithm>
#include <map>

#include "adapters.hpp"

namespace residue::detail {

namespace {

// A lossless (VP8L) bitstream is decoded by libwebp into a full ARGB buffer whatever the crop,
// 4 bytes a pixel: above this many pixels it would break the memory bound (docs/reliability.md).
constexpr std::uint64_t kLosslessPixelLimit = 50'000'000;
// Rows and columns decoded around each band, so that chroma upsampling at the band's edges sees
// the same neighbours as a whole-image decode.
constexpr int kMargin = 8;

Error status_error(VP8StatusCode status) {
  if (status == VP8_STATUS_NOT_ENOUGH_DATA) {
    return {ErrorCode::kTruncated, "WebP data ends before the image does"};
  }
  if (status == VP8_STATUS_UNSUPPORTED_FEATURE) {
    return {ErrorCode::kUnsupported, "this WebP uses a feature the decoder does not support (animation?)"};
  }
  return {ErrorCode::kCorrupt, "the WebP decoder rejected the data"};
}

}  // namespace

Result<WindowPixels> decode_webp_tiles(std::span<const std::uint8_t> bytes, const WindowLayout& layout) {
  WebPDecoderConfig config;
  if (WebPInitDecoderConfig(&config) == 0)
    return make_error(ErrorCode::kInternal, "WebP: libwebp version mismatch");
  const VP8StatusCode probed = WebPGetFeatures(bytes.data(), bytes.size(), &config.input);
  if (probed != VP8_STATUS_OK) return status_error(probed);
  if (config.input.has_animation != 0) {
    return make_error(ErrorCode::kUnsupported, "animated WebP is not analysed");
  }
  const int width = config.input.width;
  const int height = config.input.height;
  if (config.input.format == 2 && static_cast<std::uint64_t>(width) * height > kLosslessPixelLimit) {
    return make_error(ErrorCode::kTooLarge,
                      "lossless WebP above 50 megapixels is not decoded (its decoder holds "
                      "the whole image, 4 bytes a pixel)");
  }
  WindowPixels out;
  out.channels = 3;
  out.alpha_dropped = config.input.has_alpha != 0;
  std::map<int, std::pair<int, int>> bands;  // window row y -> column span [x0, x1)
  for (const auto& o : layout.origins) {
    auto [it, fresh] = bands.try_emplace(o.y, o.x, o.x + layout.size);
    if (!fresh)
      it->second = {std::min(it->second.first, o.x), std::max(it->second.second, o.x + layout.size)};
    out.tiles.push_back(
        Tile{o.x, o.y, layout.size, 3, std::vector<float>(size_t{3} * layout.size * layout.size)});
  }
  for (const auto& [y, span] : bands) {
    // Crop origins are even (libwebp rounds them down for 4:2:0 chroma); window origins are
    // multiples of 8, the margin too.
    const int left = std::max(0, span.first - kMargin);
    const int top = std::max(0, y - kMargin);
    const int right = std::min(width, span.second + kMargin);
    const int bottom = std::min(height, y + layout.size + kMargin);
    config.options.use_cropping = 1;
    config.options.crop_left = left;
    config.options.crop_top = top;
    config.options.crop_width = right - left;
    config.options.crop_height = bottom - top;
    config.output.colorspace = MODE_RGB;
    const VP8StatusCode status = WebPDecode(bytes.data(), bytes.size(), &config);
    if (status != VP8_STATUS_OK) {
      WebPFreeDecBuffer(&config.output);
      return status_error(status);
    }
    const WebPRGBABuffer& rgb = config.output.u.RGBA;
    for (auto& t : out.tiles) {
      if (t.y != y) continue;
      for (int row = 0; row < t.size; ++row) {
        const std::uint8_t* src = rgb.rgba + static_cast<size_t>(t.y + row - top) * rgb.stride +
                                  static_cast<size_t>(t.x - left) * 3;
        for (int c = 0; c < 3; ++c) {
          float* dst = t.plane(c) + static_cast<size_t>(row) * t.size;
          for (int i = 0; i < t.size; ++i) dst[i] = src[static_cast<size_t>(i) * 3 + c];
        }
      }
    }
    out.decoded_rows += static_cast<std::uint64_t>(bottom);
    WebPFreeDecBuffer(&config.output);
  }
  return out;
}

}  // namespace residue::detail
