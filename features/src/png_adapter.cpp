// libpng adapter: writes palette PNGs (colour type 3), which OpenCV's encoder cannot.
#include <png.h>

#include <csetjmp>

#include "adapters.hpp"

namespace residue::detail {

namespace {

void append(png_structp png, png_bytep data, png_size_t length) {
  auto* out = static_cast<std::vector<std::uint8_t>*>(png_get_io_ptr(png));
  out->insert(out->end(), data, data + length);
}

void no_flush(png_structp /*png*/) {}

}  // namespace

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
