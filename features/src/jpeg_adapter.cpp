// libjpeg-turbo adapter. Errors leave libjpeg by longjmp to the setjmp in decode_jpeg; no C++
// object with a destructor lives in a frame that the jump crosses.
#include <algorithm>
#include <csetjmp>
#include <cstddef>
#include <cstdio>
#include <string>

// jpeglib.h needs size_t and FILE declared before it, and jerror.h after it.
// clang-format off
#include <jpeglib.h>
#include <jerror.h>
// clang-format on

#include "adapters.hpp"

namespace residue::detail {

namespace {

struct ErrorManager {
  jpeg_error_mgr base;
  std::jmp_buf jump;
  char message[JMSG_LENGTH_MAX];
  bool hit_eof;
  std::vector<DecoderWarning>* warnings;  // lives in the caller's frame, outside the jump
};

// Warnings (jerror.h) that mean the entropy-coded data are damaged: the decoder resynchronised,
// skipped bytes or substituted zeros, so the pixels are not the ones that were written.
bool damages_data(int code) {
  return code == JWRN_EXTRANEOUS_DATA || code == JWRN_HIT_MARKER || code == JWRN_HUFF_BAD_CODE ||
         code == JWRN_MUST_RESYNC || code == JWRN_ARITH_BAD_CODE || code == JWRN_BOGUS_PROGRESSION ||
         code == JWRN_NOT_SEQUENTIAL || code == JWRN_JPEG_EOF;
}

void on_error(j_common_ptr cinfo) {
  auto* err = reinterpret_cast<ErrorManager*>(cinfo->err);
  (*cinfo->err->format_message)(cinfo, err->message);
  std::longjmp(err->jump, 1);
}

// libjpeg's warnings (level -1) are kept, never printed; trace messages (level >= 0) are dropped.
void on_message(j_common_ptr cinfo, int level) {
  if (level != -1) return;
  auto* err = reinterpret_cast<ErrorManager*>(cinfo->err);
  const int code = cinfo->err->msg_code;
  if (code == JWRN_JPEG_EOF) err->hit_eof = true;
  ++cinfo->err->num_warnings;
  char text[JMSG_LENGTH_MAX];
  (*cinfo->err->format_message)(cinfo, text);
  add_decoder_warning(*err->warnings, damages_data(code) ? "damaged" : "note",
                      std::string("libjpeg: ") + text);
}

// Copies one decoded, interleaved 8-bit row into every tile that covers image row y.
void scatter_row(const JSAMPLE* row, int y, int x_offset, int channels, std::vector<Tile>& tiles) {
  for (auto& t : tiles) {
    if (y < t.y || y >= t.y + t.size) continue;
    const JSAMPLE* src = row + static_cast<size_t>(t.x - x_offset) * channels;
    for (int c = 0; c < channels; ++c) {
      float* dst = t.plane(c) + static_cast<size_t>(y - t.y) * t.size;
      for (int i = 0; i < t.size; ++i) dst[i] = src[static_cast<size_t>(i) * channels + c];
    }
  }
}

void copy_row(const JSAMPLE* row, int y, int channels, Image& image) {
  for (int c = 0; c < channels; ++c) {
    float* dst = image.plane(c) + static_cast<size_t>(y) * image.width;
    for (int i = 0; i < image.width; ++i) dst[i] = row[static_cast<size_t>(i) * channels + c];
  }
}

// First image row at or after y that some tile needs, or `height` when none.
int next_needed_row(int y, int height, const std::vector<Tile>& tiles) {
  int best = height;
  for (const auto& t : tiles) {
    if (y < t.y + t.size) best = std::min(best, std::max(y, t.y));
  }
  return best;
}

}  // namespace

Result<JpegOutput> decode_jpeg(std::span<const std::uint8_t> bytes, const DecodeLimits& limits,
                               const WindowLayout* layout, int scale_denominator) {
  JpegOutput out;
  jpeg_decompress_struct cinfo{};
  ErrorManager err{};
  std::vector<JSAMPLE> row;  // allocated before setjmp; resized only between libjpeg calls
  cinfo.err = jpeg_std_error(&err.base);
  err.base.error_exit = on_error;
  err.base.emit_message = on_message;
  err.warnings = &out.warnings;
  if (setjmp(err.jump)) {
    jpeg_destroy_decompress(&cinfo);
    if (err.hit_eof) return make_error(ErrorCode::kTruncated, "JPEG data ends before the image does");
    return make_error(ErrorCode::kCorrupt, std::string("JPEG decoder: ") + err.message);
  }
  jpeg_create_decompress(&cinfo);
  jpeg_mem_src(&cinfo, bytes.data(), static_cast<unsigned long>(bytes.size()));
  jpeg_read_header(&cinfo, TRUE);

  const std::uint64_t pixels = std::uint64_t{cinfo.image_width} * cinfo.image_height;
  if (pixels > limits.max_pixels) {
    jpeg_destroy_decompress(&cinfo);
    return make_error(ErrorCode::kTooLarge, "JPEG of " + std::to_string(cinfo.image_width) + "x" +
                                                std::to_string(cinfo.image_height) +
                                                " px is over the limit of " +
                                                std::to_string(limits.max_pixels) + " pixels");
  }
  int channels = 0;
  if (cinfo.jpeg_color_space == JCS_GRAYSCALE) {
    cinfo.out_color_space = JCS_GRAYSCALE;
    channels = 1;
  } else if (cinfo.jpeg_color_space == JCS_YCbCr || cinfo.jpeg_color_space == JCS_RGB) {
    cinfo.out_color_space = JCS_RGB;
    channels = 3;
  } else {
    jpeg_destroy_decompress(&cinfo);
    return make_error(ErrorCode::kUnsupported, "JPEG in CMYK/YCCK colour is not analysed");
  }
  auto table_of = [&](int component, std::array<int, 64>& dst) {
    // The header may name any table number 0..255; libjpeg checks it only when decoding starts.
    const int number = cinfo.comp_info[component].quant_tbl_no;
    if (number < 0 || number >= NUM_QUANT_TBLS) return false;
    const JQUANT_TBL* q = cinfo.quant_tbl_ptrs[number];
    if (q == nullptr) return false;
    for (int k = 0; k < 64; ++k) dst[k] = q->quantval[k];  // natural order (jpeglib.h)
    return true;
  };
  table_of(0, out.tables.luma);
  if (cinfo.num_components >= 3) {
    std::array<int, 64> chroma{};
    if (table_of(1, chroma)) out.tables.chroma = chroma;
  }

  if (layout == nullptr) {
    cinfo.scale_num = 1;
    cinfo.scale_denom = static_cast<unsigned int>(scale_denominator);
  }
  jpeg_start_decompress(&cinfo);
  const int height = static_cast<int>(cinfo.output_height);
  if (layout == nullptr) {
    out.full = Image::zeros(static_cast<int>(cinfo.output_width), height, channels);
    row.resize(static_cast<size_t>(cinfo.output_width) * channels);
    while (static_cast<int>(cinfo.output_scanline) < height) {
      JSAMPROW rows[1] = {row.data()};
      const int y = static_cast<int>(cinfo.output_scanline);
      jpeg_read_scanlines(&cinfo, rows, 1);
      copy_row(row.data(), y, channels, out.full);
      ++out.decoded_rows;
    }
  } else {
    int x_min = static_cast<int>(cinfo.output_width);
    int x_max = 0;
    for (const auto& o : layout->origins) {
      out.tiles.push_back(
          Tile{o.x, o.y, layout->size, channels,
               std::vector<float>(static_cast<size_t>(channels) * layout->size * layout->size)});
      x_min = std::min(x_min, o.x);
      x_max = std::max(x_max, o.x + layout->size);
    }
    auto x_offset = static_cast<JDIMENSION>(x_min);
    auto crop_width = static_cast<JDIMENSION>(x_max - x_min);
    jpeg_crop_scanline(&cinfo, &x_offset, &crop_width);  // widens to iMCU boundaries
    row.resize(static_cast<size_t>(cinfo.output_width) * channels);
    while (static_cast<int>(cinfo.output_scanline) < height) {
      const int y = static_cast<int>(cinfo.output_scanline);
      // Skipping to the very end would only move the counter (jdapistd.c) and miss a truncated
      // tail, so the last row is always decoded: the whole entropy-coded stream is then read.
      const int next = std::min(next_needed_row(y, height, out.tiles), height - 1);
      if (next > y) {
        jpeg_skip_scanlines(&cinfo, static_cast<JDIMENSION>(next - y));
        continue;
      }
      JSAMPROW rows[1] = {row.data()};
      jpeg_read_scanlines(&cinfo, rows, 1);
      scatter_row(row.data(), y, static_cast<int>(x_offset), channels, out.tiles);
      ++out.decoded_rows;
    }
  }
  jpeg_finish_decompress(&cinfo);
  jpeg_destroy_decompress(&cinfo);
  if (err.hit_eof) return make_error(ErrorCode::kTruncated, "JPEG data ends before the image does");
  return out;
}

}  // namespace residue::detail
