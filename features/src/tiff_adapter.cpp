// libtiff adapter: reads a TIFF scanline by scanline into the analysis windows, so that memory
// follows the windows, not the image. Only the common layouts are read this way (see
// decode_tiff_tiles); the others go through OpenCV's whole-image decode, under a smaller pixel limit.
#include <tiffio.h>

#include <algorithm>
#include <cstdarg>
#include <cstdio>
#include <cstring>
#include <memory>
#include <string>

#include "adapters.hpp"

namespace residue::detail {

namespace {

struct Source {
  std::span<const std::uint8_t> bytes;
  toff_t at = 0;
};

tmsize_t read_proc(thandle_t h, void* buf, tmsize_t size) {
  auto* s = static_cast<Source*>(h);
  if (size <= 0 || s->at >= s->bytes.size()) return 0;
  const auto n = std::min<toff_t>(static_cast<toff_t>(size), s->bytes.size() - s->at);
  std::memcpy(buf, s->bytes.data() + s->at, n);
  s->at += n;
  return static_cast<tmsize_t>(n);
}
tmsize_t write_proc(thandle_t /*h*/, void* /*buf*/, tmsize_t /*size*/) { return -1; }
toff_t seek_proc(thandle_t h, toff_t off, int whence) {
  auto* s = static_cast<Source*>(h);
  const toff_t base = whence == SEEK_CUR ? s->at : whence == SEEK_END ? s->bytes.size() : 0;
  s->at = base + off;
  return s->at;
}
int close_proc(thandle_t /*h*/) { return 0; }
toff_t size_proc(thandle_t h) { return static_cast<Source*>(h)->bytes.size(); }
int map_proc(thandle_t h, void** base, toff_t* size) {
  auto* s = static_cast<Source*>(h);
  *base = const_cast<std::uint8_t*>(s->bytes.data());
  *size = s->bytes.size();
  return 1;
}
void unmap_proc(thandle_t /*h*/, void* /*base*/, toff_t /*size*/) {}

void quiet(const char* /*module*/, const char* /*fmt*/, va_list /*ap*/) {}

// What libtiff said about one handle: warnings kept (never printed), and the last error's words.
struct Report {
  std::vector<DecoderWarning>* warnings = nullptr;
  std::string error;
};

std::string formatted(const char* module, const char* fmt, va_list ap) {
  char text[400];
  std::vsnprintf(text, sizeof text, fmt, ap);
  return "libtiff: " + (module != nullptr ? std::string(module) + ": " : std::string()) + text;
}

int keep_warning(TIFF* /*tif*/, void* user, const char* module, const char* fmt, va_list ap) {
  auto* report = static_cast<Report*>(user);
  const std::string message = formatted(module, fmt, ap);
  add_decoder_warning(*report->warnings, warning_kind_from_words(message), message);
  return 1;  // handled: the global handler is not called
}

int keep_error(TIFF* /*tif*/, void* user, const char* module, const char* fmt, va_list ap) {
  static_cast<Report*>(user)->error = formatted(module, fmt, ap);
  return 1;
}

struct OptionsFree {
  void operator()(TIFFOpenOptions* o) const { TIFFOpenOptionsFree(o); }
};

struct TiffCloser {
  void operator()(TIFF* t) const { TIFFClose(t); }
};

// Whether some strip's data lies (partly) beyond the end of the file.
bool strips_past_end(TIFF* tif, size_t file_size) {
  const tstrip_t n = TIFFNumberOfStrips(tif);
  for (tstrip_t s = 0; s < n; ++s) {
    if (TIFFGetStrileOffset(tif, s) + TIFFGetStrileByteCount(tif, s) > file_size) return true;
  }
  return false;
}

constexpr float kOne257th = static_cast<float>(1.0 / 257.0);

}  // namespace

Result<std::optional<WindowPixels>> decode_tiff_tiles(std::span<const std::uint8_t> bytes,
                                                      const WindowLayout& layout) {
  // libtiff's default handlers print to stderr. Messages about this handle go to `report`; the
  // global handlers, silenced once, only hear OpenCV's decodes of the rarer layouts.
  static const bool silenced = [] {
    TIFFSetErrorHandler(quiet);
    TIFFSetWarningHandler(quiet);
    return true;
  }();
  (void)silenced;
  WindowPixels out;
  Report report{&out.warnings, {}};
  const std::unique_ptr<TIFFOpenOptions, OptionsFree> options(TIFFOpenOptionsAlloc());
  if (!options) return make_error(ErrorCode::kInternal, "TIFF: libtiff could not start");
  TIFFOpenOptionsSetErrorHandlerExtR(options.get(), keep_error, &report);
  TIFFOpenOptionsSetWarningHandlerExtR(options.get(), keep_warning, &report);
  Source src{bytes};
  std::unique_ptr<TIFF, TiffCloser> tif(TIFFClientOpenExt("image", "r", &src, read_proc, write_proc,
                                                          seek_proc, close_proc, size_proc, map_proc,
                                                          unmap_proc, options.get()));
  if (!tif) return make_error(ErrorCode::kCorrupt, "the TIFF decoder rejected the header: " + report.error);
  std::uint32_t width = 0;
  std::uint32_t height = 0;
  std::uint16_t bits = 0;
  std::uint16_t spp = 1;
  std::uint16_t photometric = 0;
  std::uint16_t planar = PLANARCONFIG_CONTIG;
  std::uint16_t format = SAMPLEFORMAT_UINT;
  std::uint16_t orientation = ORIENTATION_TOPLEFT;
  TIFFGetField(tif.get(), TIFFTAG_IMAGEWIDTH, &width);
  TIFFGetField(tif.get(), TIFFTAG_IMAGELENGTH, &height);
  TIFFGetFieldDefaulted(tif.get(), TIFFTAG_BITSPERSAMPLE, &bits);
  TIFFGetFieldDefaulted(tif.get(), TIFFTAG_SAMPLESPERPIXEL, &spp);
  TIFFGetField(tif.get(), TIFFTAG_PHOTOMETRIC, &photometric);
  TIFFGetFieldDefaulted(tif.get(), TIFFTAG_PLANARCONFIG, &planar);
  TIFFGetFieldDefaulted(tif.get(), TIFFTAG_SAMPLEFORMAT, &format);
  TIFFGetFieldDefaulted(tif.get(), TIFFTAG_ORIENTATION, &orientation);
  // Read scanline by scanline: contiguous 8- or 16-bit unsigned grey (one sample) or RGB (three,
  // or four with alpha), stored in strips, top row first. Anything else: std::nullopt.
  const bool grey = photometric == PHOTOMETRIC_MINISBLACK && spp == 1;
  const bool rgb = photometric == PHOTOMETRIC_RGB && (spp == 3 || spp == 4);
  if (!(grey || rgb) || (bits != 8 && bits != 16) || planar != PLANARCONFIG_CONTIG ||
      format != SAMPLEFORMAT_UINT || orientation != ORIENTATION_TOPLEFT || TIFFIsTiled(tif.get()) != 0) {
    return std::optional<WindowPixels>();
  }
  out.channels = grey ? 1 : 3;
  out.alpha_dropped = spp == 4;
  for (const auto& o : layout.origins) {
    out.tiles.push_back(
        Tile{o.x, o.y, layout.size, out.channels,
             std::vector<float>(static_cast<size_t>(out.channels) * layout.size * layout.size)});
  }
  std::vector<std::uint8_t> row(static_cast<size_t>(TIFFScanlineSize(tif.get())));
  if (row.size() < static_cast<size_t>(width) * spp * (bits / 8)) {
    return make_error(ErrorCode::kCorrupt, "TIFF scanline size disagrees with the image width");
  }
  for (std::uint32_t y = 0; y < height; ++y) {
    if (TIFFReadScanline(tif.get(), row.data(), y, 0) < 0) {
      return make_error(
          strips_past_end(tif.get(), bytes.size()) ? ErrorCode::kTruncated : ErrorCode::kCorrupt,
          "the TIFF decoder failed at row " + std::to_string(y) + ": " + report.error);
    }
    for (auto& t : out.tiles) {
      if (static_cast<int>(y) < t.y || static_cast<int>(y) >= t.y + t.size) continue;
      for (int c = 0; c < out.channels; ++c) {
        float* dst = t.plane(c) + static_cast<size_t>(static_cast<int>(y) - t.y) * t.size;
        for (int i = 0; i < t.size; ++i) {
          const size_t k = static_cast<size_t>(t.x + i) * spp + c;
          if (bits == 16) {
            std::uint16_t v = 0;
            std::memcpy(&v, row.data() + 2 * k, 2);  // libtiff gives host byte order
            dst[i] = static_cast<float>(v) * kOne257th;
          } else {
            dst[i] = row[k];
          }
        }
      }
    }
  }
  out.decoded_rows = height;
  return std::optional<WindowPixels>(std::move(out));
}

}  // namespace residue::detail
