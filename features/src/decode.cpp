#include "residue/features/decode.hpp"

#include <algorithm>
#include <cctype>
#include <cerrno>
#include <cstring>
#include <fstream>
#include <string>
#include <system_error>

#include "adapters.hpp"

namespace residue {

Image Image::zeros(int width, int height, int channels) {
  return Image{width, height, channels, std::vector<float>(static_cast<size_t>(channels) * width * height)};
}

namespace {

std::vector<float> luma_of(const float* r, const float* g, const float* b, size_t n) {
  std::vector<float> y(n);
  for (size_t i = 0; i < n; ++i) y[i] = 0.299F * r[i] + 0.587F * g[i] + 0.114F * b[i];
  return y;
}

// Header checks shared by both decode paths: known format, plausible size, under the pixel limit.
Result<ImageHeader> checked_header(std::span<const std::uint8_t> bytes, const DecodeLimits& limits) {
  auto header = read_header(bytes);
  if (!header) return header;
  const std::uint64_t pixels = std::uint64_t(header->width) * std::uint64_t(header->height);
  if (pixels > limits.max_pixels) {
    return make_error(ErrorCode::kTooLarge, "header declares " + std::to_string(header->width) + "x" +
                                                std::to_string(header->height) + " px, over the limit of " +
                                                std::to_string(limits.max_pixels) +
                                                " pixels; refused before decoding");
  }
  return header;
}

// A whole non-JPEG image: PNG through our libpng reader (its warnings caught, not printed), the
// other formats through OpenCV.
Result<Image> decode_whole(std::span<const std::uint8_t> bytes, const ImageHeader& header) {
  if (header.format == ImageFormat::kPng) {
    auto png = detail::decode_png_image(bytes);
    if (!png) return png.error();
    return std::move(png->image);
  }
  bool alpha_dropped = false;
  return detail::decode_with_opencv(bytes, header, &alpha_dropped);
}

}  // namespace

std::vector<float> Tile::luma() const {
  const size_t n = static_cast<size_t>(size) * size;
  if (channels == 1) return {samples.begin(), samples.begin() + static_cast<std::ptrdiff_t>(n)};
  return luma_of(plane(0), plane(1), plane(2), n);
}

std::vector<float> luma(const Image& image) {
  const size_t n = static_cast<size_t>(image.width) * image.height;
  if (image.channels == 1)
    return {image.samples.begin(), image.samples.begin() + static_cast<std::ptrdiff_t>(n)};
  return luma_of(image.plane(0), image.plane(1), image.plane(2), n);
}

Image crop(const Image& image, int x, int y, int w, int h) {
  Image out = Image::zeros(w, h, image.channels);
  for (int c = 0; c < image.channels; ++c) {
    for (int r = 0; r < h; ++r) {
      std::copy_n(image.plane(c) + static_cast<size_t>(y + r) * image.width + x, w,
                  out.plane(c) + static_cast<size_t>(r) * w);
    }
  }
  return out;
}

bool damaged(const std::vector<DecoderWarning>& warnings) {
  return std::any_of(warnings.begin(), warnings.end(), [](const auto& w) { return w.kind == "damaged"; });
}

std::string warning_kind_from_words(const std::string& message) {
  std::string lower(message);
  std::transform(lower.begin(), lower.end(), lower.begin(),
                 [](unsigned char c) { return static_cast<char>(std::tolower(c)); });
  static const char* const kDamage[] = {"corrupt",
                                        "truncat",
                                        "premature",
                                        "extraneous",
                                        "crc",
                                        "damaged",
                                        "bad code",
                                        "invalid code",
                                        "not terminated",
                                        "end of data",
                                        "too much image",
                                        "extra compressed data"};
  for (const char* word : kDamage) {
    if (lower.find(word) != std::string::npos) return "damaged";
  }
  return "note";
}

std::string png_warning_kind(const std::string& message) {
  const bool chunk_prefix =
      message.size() > 5 && message[4] == ':' &&
      std::all_of(message.begin(), message.begin() + 4, [](unsigned char c) { return std::isalpha(c) != 0; });
  const bool ancillary = chunk_prefix && std::islower(static_cast<unsigned char>(message[0])) != 0;
  if (ancillary && warning_kind_from_words(message) == "note") return "note";
  return "damaged";
}

void add_decoder_warning(std::vector<DecoderWarning>& warnings, const std::string& kind,
                         const std::string& message) {
  for (const auto& w : warnings) {
    if (w.kind == kind && w.message == message) return;
  }
  if (warnings.size() < kMaxDecoderWarnings) {
    warnings.push_back({kind, message});
    return;
  }
  // Full: a damaged warning still takes the last place, so that damage is never lost behind notes.
  if (kind == "damaged" && !damaged(warnings)) warnings.back() = {kind, message};
}

Result<std::vector<std::uint8_t>> read_file(const std::filesystem::path& path, const DecodeLimits& limits) {
  std::error_code ec;
  const auto status = std::filesystem::status(path, ec);
  if (ec || !std::filesystem::exists(status)) {
    return make_error(ErrorCode::kUnreadable, "cannot open: no such file");
  }
  if (!std::filesystem::is_regular_file(status)) {
    return make_error(ErrorCode::kUnreadable, "not a regular file");
  }
  const auto size = std::filesystem::file_size(path, ec);
  if (ec) return make_error(ErrorCode::kUnreadable, "cannot read size: " + ec.message());
  if (size > limits.max_file_bytes) {
    return make_error(ErrorCode::kTooLarge, "file of " + std::to_string(size) +
                                                " bytes is over the limit of " +
                                                std::to_string(limits.max_file_bytes) + " bytes");
  }
  std::ifstream in(path, std::ios::binary);
  if (!in) return make_error(ErrorCode::kUnreadable, std::string("cannot open: ") + std::strerror(errno));
  std::vector<std::uint8_t> bytes(size);
  in.read(reinterpret_cast<char*>(bytes.data()), static_cast<std::streamsize>(size));
  if (static_cast<std::uint64_t>(in.gcount()) != size) {
    return make_error(ErrorCode::kUnreadable, "read fewer bytes than the file size");
  }
  return bytes;
}

Result<Image> decode_image(std::span<const std::uint8_t> bytes, const DecodeLimits& limits) {
  auto header = checked_header(bytes, limits);
  if (!header) return header.error();
  if (header->format == ImageFormat::kJpeg) {
    auto out = detail::decode_jpeg(bytes, limits, nullptr);
    if (!out) return out.error();
    return std::move(out->full);
  }
  return decode_whole(bytes, *header);
}

Result<std::size_t> decode_plain_8bit(std::span<const std::uint8_t> bytes) {
  return detail::decode_plain_8bit(bytes);
}

Result<Image> decode_preview(std::span<const std::uint8_t> bytes, const DecodeLimits& limits) {
  auto header = checked_header(bytes, limits);
  if (!header) return header.error();
  if (header->format == ImageFormat::kJpeg) {
    auto out = detail::decode_jpeg(bytes, limits, nullptr, 8);
    if (!out) return out.error();
    return std::move(out->full);
  }
  return decode_whole(bytes, *header);
}

Result<DecodedWindows> decode_windows(std::span<const std::uint8_t> bytes, const DecodeLimits& limits,
                                      const WindowPolicy& policy, bool skip_unused_rows) {
  auto header = checked_header(bytes, limits);
  if (!header) return header.error();
  auto layout = plan_windows(header->width, header->height, policy);
  if (!layout) return layout.error();

  DecodedWindows out;
  out.header = *header;
  out.layout = *layout;
  if (header->format == ImageFormat::kJpeg) {
    auto jpeg = detail::decode_jpeg(bytes, limits, skip_unused_rows ? &out.layout : nullptr);
    if (!jpeg) return jpeg.error();
    out.jpeg_tables = jpeg->tables;
    out.decoded_rows = jpeg->decoded_rows;
    out.decoder_warnings = std::move(jpeg->warnings);
    out.tiles = skip_unused_rows ? std::move(jpeg->tiles) : cut_tiles(jpeg->full, out.layout);
  } else {
    // PNG, WebP and the common TIFFs window by window: memory follows the windows, not the image
    // (docs/reliability.md). A TIFF in a rarer layout comes back empty and is decoded whole below.
    using Part = Result<std::optional<detail::WindowPixels>>;
    const auto always = [](Result<detail::WindowPixels> r) -> Part {
      if (!r) return r.error();
      return std::optional(std::move(*r));
    };
    Part part = std::optional<detail::WindowPixels>();
    if (header->format == ImageFormat::kPng) part = always(detail::decode_png_tiles(bytes, out.layout));
    if (header->format == ImageFormat::kWebp) part = always(detail::decode_webp_tiles(bytes, out.layout));
    if (header->format == ImageFormat::kTiff) part = detail::decode_tiff_tiles(bytes, out.layout);
    if (!part) return part.error();
    if (*part) {
      out.tiles = std::move((*part)->tiles);
      out.alpha_dropped = (*part)->alpha_dropped;
      out.decoded_rows = (*part)->decoded_rows;
      out.decoder_warnings = std::move((*part)->warnings);
      out.channels = out.tiles.empty() ? 0 : out.tiles.front().channels;
      return out;
    }
    // BMP and the rarer TIFF layouts are decoded whole (about 20 bytes a pixel at the peak), so
    // they have their own, smaller pixel limit.
    const auto pixels =
        static_cast<std::uint64_t>(header->width) * static_cast<std::uint64_t>(header->height);
    if (pixels > limits.max_whole_decode_pixels) {
      return make_error(ErrorCode::kTooLarge,
                        std::string(image_format_name(header->format)) + " of " +
                            std::to_string(pixels / 1000000) +
                            " MP in this layout is decoded whole, and the limit for that is " +
                            std::to_string(limits.max_whole_decode_pixels / 1000000) +
                            " MP (memory bound); convert it to PNG or an 8-bit stripped TIFF");
    }
    auto image = detail::decode_with_opencv(bytes, *header, &out.alpha_dropped);
    if (!image) return image.error();
    if (image->width != header->width || image->height != header->height) {
      return make_error(ErrorCode::kCorrupt, "decoded size differs from the header's");
    }
    out.decoded_rows = static_cast<std::uint64_t>(image->height);
    out.tiles = cut_tiles(*image, out.layout);
  }
  out.channels = out.tiles.empty() ? 0 : out.tiles.front().channels;
  return out;
}

Result<std::vector<std::uint8_t>> encode_image(const Image& image, ImageFormat format, int quality) {
  return detail::encode(image, format, quality);
}

}  // namespace residue
