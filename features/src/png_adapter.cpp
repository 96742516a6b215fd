// libpng adapter: decodes PNGs row by row into the analysis windows (memory bounded by the windows,
// not the image), and writes palette PNGs (colour type 3), which OpenCV's encoder cannot.
// Errors leave libpng by longjmp to the setjmp in the calling function; no C++ object with a
// destructor is created between a setjmp and the libpng calls that may jump to it.
#include <png.h>

#include <algorithm>
#include <csetjmp>
#include <cstdio>
#include <functional>
#include <map>

#include "adapters.hpp"

namespace residue::detail {

namespace {

void append(png_structp png, png_bytep data, png_size_t length) {
  auto* out = static_cast<std::vector<std::uint8_t>*>(png_get_io_ptr(png));
  out->insert(out->end(), data, data + length);
}

void no_flush(png_structp /*png*/) {}

struct Source {
  std::span<const std::uint8_t> bytes;
  size_t at = 0;
  bool ran_out = false;
};

void take(png_structp png, png_bytep data, png_size_t length) {
  auto* src = static_cast<Source*>(png_get_io_ptr(png));
  if (length > src->bytes.size() - src->at) {
    src->ran_out = true;
    png_error(png, "the data ends early");
  }
  std::copy_n(src->bytes.data() + src->at, length, data);
  src->at += length;
}

// What libpng said: its warnings (kept, never printed) and the message of the error that ended it.
struct Report {
  std::vector<DecoderWarning>* warnings = nullptr;
  char error[160] = {};
};

void keep_warning(png_structp png, png_const_charp message) {
  auto* report = static_cast<Report*>(png_get_error_ptr(png));
  add_decoder_warning(*report->warnings, png_warning_kind(message), std::string("libpng: ") + message);
}

void raise_error(png_structp png, png_const_charp message) {
  auto* report = static_cast<Report*>(png_get_error_ptr(png));
  if (report != nullptr) std::snprintf(report->error, sizeof report->error, "%s", message);
  png_longjmp(png, 1);
}

constexpr float kOne257th = static_cast<float>(1.0 / 257.0);

// Channel c of `count` interleaved pixels starting at src (8 bits, or 16 bits big-endian scaled by
// 1/257 onto the 8-bit scale in single precision, as OpenCV's convertTo) into dst.
void unpack_channel(const png_byte* src, int count, int channels, int c, int bit_depth, float* dst) {
  const size_t bytes_per_sample = bit_depth == 16 ? 2 : 1;
  for (int i = 0; i < count; ++i) {
    const size_t k = (static_cast<size_t>(i) * channels + c) * bytes_per_sample;
    dst[i] = bit_depth == 16 ? static_cast<float>((src[k] << 8) | src[k + 1]) * kOne257th : src[k];
  }
}

// Copies image row y (interleaved samples) into every tile covering it.
void scatter_png_row(const png_byte* row, int y, int channels, int bit_depth, std::vector<Tile>& tiles) {
  const size_t bytes_per_sample = bit_depth == 16 ? 2 : 1;
  for (auto& t : tiles) {
    if (y < t.y || y >= t.y + t.size) continue;
    const png_byte* src = row + static_cast<size_t>(t.x) * channels * bytes_per_sample;
    for (int c = 0; c < channels; ++c)
      unpack_channel(src, t.size, channels, c, bit_depth, t.plane(c) + static_cast<size_t>(y - t.y) * t.size);
  }
}

bool needed(int y, const WindowLayout& layout) {
  return std::any_of(layout.origins.begin(), layout.origins.end(),
                     [&](const WindowRect& o) { return y >= o.y && y < o.y + layout.size; });
}

// The rows of a PNG as libpng gives them, one callback per row that `wanted` asks for (after all
// passes when interlaced), after `started` has heard the size and channels. The same pixels as
// OpenCV's imread(IMREAD_UNCHANGED) with alpha dropped afterwards: palette expanded to RGB, grey
// below 8 bits expanded to 8, 16 bits kept, no gamma.
struct PngShape {
  int width = 0;
  int height = 0;
  int channels = 0;
  int depth = 0;
  bool alpha_dropped = false;
};

Result<PngShape> read_png(std::span<const std::uint8_t> bytes, std::vector<DecoderWarning>& warnings,
                          const std::function<bool(int)>& wanted,
                          const std::function<void(const PngShape&)>& started,
                          const std::function<void(int, const png_byte*)>& take_row) {
  Source src{bytes};
  Report report{&warnings};
  png_structp png = png_create_read_struct(PNG_LIBPNG_VER_STRING, &report, raise_error, keep_warning);
  png_infop info = png != nullptr ? png_create_info_struct(png) : nullptr;
  if (info == nullptr) {
    png_destroy_read_struct(&png, nullptr, nullptr);
    return make_error(ErrorCode::kInternal, "PNG: libpng could not start");
  }
  // Everything that lives across the jump is declared before setjmp.
  PngShape shape;
  std::vector<png_byte> scratch;
  std::map<int, std::vector<png_byte>> kept;  // interlaced images: the rows wanted
  if (setjmp(png_jmpbuf(png)) != 0) {         // NOLINT(cert-err52-cpp): libpng reports errors by longjmp
    png_destroy_read_struct(&png, &info, nullptr);
    if (src.ran_out) return make_error(ErrorCode::kTruncated, "PNG data ends before the image does");
    return make_error(ErrorCode::kCorrupt, std::string("the PNG decoder rejected the data: ") + report.error);
  }
  png_set_read_fn(png, &src, take);
  png_set_user_limits(png, 0x7fffffff, 0x7fffffff);  // the header check already bounded the size
  png_read_info(png, info);
  shape.width = static_cast<int>(png_get_image_width(png, info));
  shape.height = static_cast<int>(png_get_image_height(png, info));
  const int colour = png_get_color_type(png, info);
  const int depth = png_get_bit_depth(png, info);
  shape.alpha_dropped = (colour & PNG_COLOR_MASK_ALPHA) != 0 || png_get_valid(png, info, PNG_INFO_tRNS) != 0;
  if (colour == PNG_COLOR_TYPE_PALETTE) png_set_palette_to_rgb(png);
  if (colour == PNG_COLOR_TYPE_GRAY && depth < 8) png_set_expand_gray_1_2_4_to_8(png);
  if (colour == PNG_COLOR_TYPE_GRAY_ALPHA) png_set_gray_to_rgb(png);  // as OpenCV: grey + alpha -> BGRA
  if (shape.alpha_dropped) png_set_strip_alpha(png);  // also the alpha a palette's tRNS expands to
  const int passes = png_set_interlace_handling(png);
  png_read_update_info(png, info);
  shape.channels = (colour & PNG_COLOR_MASK_COLOR) != 0 || colour == PNG_COLOR_TYPE_GRAY_ALPHA ? 3 : 1;
  shape.depth = png_get_bit_depth(png, info);
  if (static_cast<int>(png_get_channels(png, info)) != shape.channels)
    png_error(png, "unexpected channel count");
  scratch.resize(png_get_rowbytes(png, info));
  started(shape);
  if (passes == 1) {
    for (int y = 0; y < shape.height; ++y) {
      png_read_row(png, scratch.data(), nullptr);
      if (wanted(y)) take_row(y, scratch.data());
    }
  } else {
    // Adam7: every pass adds pixels to rows all over the image, so the rows wanted are kept whole
    // until the last pass; the others go to a scratch row.
    for (int y = 0; y < shape.height; ++y) {
      if (wanted(y)) kept[y].assign(scratch.size(), 0);
    }
    for (int pass = 0; pass < passes; ++pass) {
      for (int y = 0; y < shape.height; ++y) {
        const auto it = kept.find(y);
        png_read_row(png, it != kept.end() ? it->second.data() : scratch.data(), nullptr);
      }
    }
    for (const auto& [y, row] : kept) take_row(y, row.data());
  }
  png_read_end(png, nullptr);
  png_destroy_read_struct(&png, &info, nullptr);
  return shape;
}

}  // namespace

Result<WindowPixels> decode_png_tiles(std::span<const std::uint8_t> bytes, const WindowLayout& layout) {
  WindowPixels out;
  PngShape shape;
  auto read = read_png(
      bytes, out.warnings, [&](int y) { return needed(y, layout); },
      [&](const PngShape& s) {
        shape = s;
        for (const auto& o : layout.origins) {
          out.tiles.push_back(
              Tile{o.x, o.y, layout.size, s.channels,
                   std::vector<float>(static_cast<size_t>(s.channels) * layout.size * layout.size)});
        }
      },
      [&](int y, const png_byte* row) { scatter_png_row(row, y, shape.channels, shape.depth, out.tiles); });
  if (!read) return read.error();
  out.channels = read->channels;
  out.alpha_dropped = read->alpha_dropped;
  out.decoded_rows = static_cast<std::uint64_t>(read->height);
  return out;
}

Result<PngImage> decode_png_image(std::span<const std::uint8_t> bytes) {
  PngImage out;
  PngShape shape;
  auto read = read_png(
      bytes, out.warnings, [](int /*y*/) { return true; },
      [&](const PngShape& s) {
        shape = s;
        out.image = Image::zeros(s.width, s.height, s.channels);
      },
      [&](int y, const png_byte* row) {
        for (int c = 0; c < shape.channels; ++c) {
          unpack_channel(row, shape.width, shape.channels, c, shape.depth,
                         out.image.plane(c) + static_cast<size_t>(y) * shape.width);
        }
      });
  if (!read) return read.error();
  out.alpha_dropped = read->alpha_dropped;
  return out;
}

Result<std::vector<std::uint8_t>> encode_palette_png(
    int width, int height, const std::vector<std::uint8_t>& indices,
    const std::vector<std::array<std::uint8_t, 3>>& palette) {
  if (palette.empty() || palette.size() > 256 || indices.size() != static_cast<size_t>(width) * height) {
    return make_error(ErrorCode::kInternal, "palette PNG: inconsistent palette or index plane");
  }
  png_structp png = png_create_write_struct(PNG_LIBPNG_VER_STRING, nullptr, nullptr, nullptr);
  png_infop info = png != nullptr ? png_create_info_struct(png) : nullptr;
  if (info == nullptr) {
    png_destroy_write_struct(&png, nullptr);
    return make_error(ErrorCode::kInternal, "palette PNG: libpng could not start");
  }
  std::vector<std::uint8_t> out;
  std::vector<png_color> colours;
  colours.reserve(palette.size());
  for (const auto& c : palette) colours.push_back({c[0], c[1], c[2]});
  std::vector<png_const_bytep> rows(static_cast<size_t>(height));
  for (int y = 0; y < height; ++y)
    rows[static_cast<size_t>(y)] = indices.data() + static_cast<size_t>(y) * width;
  if (setjmp(png_jmpbuf(png)) != 0) {  // NOLINT(cert-err52-cpp): libpng reports errors by longjmp
    png_destroy_write_struct(&png, &info);
    return make_error(ErrorCode::kInternal, "palette PNG: libpng failed to write");
  }
  png_set_write_fn(png, &out, append, no_flush);
  png_set_IHDR(png, info, static_cast<png_uint_32>(width), static_cast<png_uint_32>(height), 8,
               PNG_COLOR_TYPE_PALETTE, PNG_INTERLACE_NONE, PNG_COMPRESSION_TYPE_DEFAULT,
               PNG_FILTER_TYPE_DEFAULT);
  png_set_PLTE(png, info, colours.data(), static_cast<int>(colours.size()));
  png_write_info(png, info);
  png_write_rows(png, const_cast<png_bytepp>(rows.data()), static_cast<png_uint_32>(height));
  png_write_end(png, info);
  png_destroy_write_struct(&png, &info);
  return out;
}

}  // namespace residue::detail
