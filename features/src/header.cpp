// Header parsers for the five containers: just enough to learn the pixel size before decoding.
// Layouts from the format specifications: PNG (ISO/IEC 15948, IHDR), JPEG (ITU-T T.81 B.2.2,
// SOFn), BMP (BITMAPINFOHEADER / BITMAPCOREHEADER), WebP (RIFF container, VP8 / VP8L / VP8X
// chunks), TIFF 6.0 (first IFD, tags 256/257/258/277).
#include <limits>
#include <string>

#include "residue/features/decode.hpp"

namespace residue {

namespace {

using Bytes = std::span<const std::uint8_t>;

std::uint32_t be16(Bytes b, size_t i) { return (b[i] << 8) | b[i + 1]; }
std::uint32_t be32(Bytes b, size_t i) {
  return (std::uint32_t{b[i]} << 24) | (b[i + 1] << 16) | (b[i + 2] << 8) | b[i + 3];
}
std::uint32_t le16(Bytes b, size_t i) { return b[i] | (b[i + 1] << 8); }
std::uint32_t le24(Bytes b, size_t i) { return b[i] | (b[i + 1] << 8) | (b[i + 2] << 16); }
std::uint32_t le32(Bytes b, size_t i) {
  return b[i] | (b[i + 1] << 8) | (b[i + 2] << 16) | (std::uint32_t{b[i + 3]} << 24);
}

Error truncated_header(std::string_view what) {
  return make_error(ErrorCode::kTruncated, "the file ends inside its " + std::string(what) + " header");
}

Result<ImageHeader> png_header(Bytes b) {
  if (b.size() < 33) return truncated_header("PNG");
  if (be32(b, 8) != 13 || b[12] != 'I' || b[13] != 'H' || b[14] != 'D' || b[15] != 'R') {
    return make_error(ErrorCode::kCorrupt, "PNG does not start with an IHDR chunk");
  }
  ImageHeader h{ImageFormat::kPng, static_cast<int>(std::min<std::uint32_t>(be32(b, 16), INT32_MAX)),
                static_cast<int>(std::min<std::uint32_t>(be32(b, 20), INT32_MAX)), 0, b[24]};
  switch (b[25]) {
    case 0:
      h.channels = 1;
      break;
    case 2:
      h.channels = 3;
      break;
    case 3:
      h.channels = 3;
      h.bit_depth = 8;
      h.palette = true;
      break;  // palette entries are 8-bit RGB
    case 4:
      h.channels = 2;
      break;
    case 6:
      h.channels = 4;
      break;
    default:
      return make_error(ErrorCode::kCorrupt, "PNG colour type " + std::to_string(b[25]) + " is invalid");
  }
  return h;
}

bool is_sof(std::uint8_t m) { return m >= 0xC0 && m <= 0xCF && m != 0xC4 && m != 0xC8 && m != 0xCC; }

Result<ImageHeader> jpeg_header(Bytes b) {
  size_t i = 2;
  while (true) {
    while (i < b.size() && b[i] != 0xFF) ++i;  // tolerate stray bytes between segments
    while (i < b.size() && b[i] == 0xFF) ++i;  // fill bytes
    if (i >= b.size()) return truncated_header("JPEG");
    const std::uint8_t marker = b[i++];
    if (marker == 0xD8 || (marker >= 0xD0 && marker <= 0xD7) || marker == 0x01) continue;
    if (marker == 0xD9 || marker == 0xDA) {
      return make_error(ErrorCode::kCorrupt, "JPEG has no frame header (SOF) before its data");
    }
    if (i + 2 > b.size()) return truncated_header("JPEG");
    const size_t length = be16(b, i);
    if (is_sof(marker)) {
      if (i + 8 > b.size()) return truncated_header("JPEG");
      ImageHeader h{ImageFormat::kJpeg, static_cast<int>(be16(b, i + 5)), static_cast<int>(be16(b, i + 3)),
                    b[i + 7], b[i + 2]};
      h.lossy = marker != 0xC3 && marker != 0xC7 && marker != 0xCB && marker != 0xCF;  // not lossless
      return h;
    }
    i += length;
  }
}

Result<ImageHeader> bmp_header(Bytes b) {
  if (b.size() < 26) return truncated_header("BMP");
  const std::uint32_t dib = le32(b, 14);
  ImageHeader h{ImageFormat::kBmp, 0, 0, 0, 0};
  if (dib == 12) {
    h.width = static_cast<int>(le16(b, 18));
    h.height = static_cast<int>(le16(b, 20));
    h.bit_depth = static_cast<int>(le16(b, 24));
  } else if (dib >= 40) {
    if (b.size() < 30) return truncated_header("BMP");
    const auto w = static_cast<std::int32_t>(le32(b, 18));
    const auto hh = static_cast<std::int32_t>(le32(b, 22));
    // -2^31 has no positive counterpart in 32 bits (found by fuzz_header).
    if (w == std::numeric_limits<std::int32_t>::min() || hh == std::numeric_limits<std::int32_t>::min())
      return make_error(ErrorCode::kCorrupt, "BMP declares a size of -2^31 pixels");
    h.width = w < 0 ? -w : w;
    h.height = hh < 0 ? -hh : hh;  // negative height: rows stored top-down
    h.bit_depth = static_cast<int>(le16(b, 28));
  } else {
    return make_error(ErrorCode::kUnsupported, "BMP info header of " + std::to_string(dib) + " bytes");
  }
  // Uncompressed rows (BI_RGB, BI_BITFIELDS) are padded to 4 bytes and start at the data offset:
  // a file shorter than that is truncated. Said here, because OpenCV's decoder would print its
  // failure to stderr in the middle of a run.
  const std::uint32_t compression = dib >= 40 && b.size() >= 34 ? le32(b, 30) : 0;
  if (compression == 0 || compression == 3) {
    const std::uint64_t row =
        (static_cast<std::uint64_t>(h.bit_depth) * static_cast<std::uint64_t>(h.width) + 31) / 32 * 4;
    const std::uint64_t needed = le32(b, 10) + row * static_cast<std::uint64_t>(h.height);
    if (b.size() < needed) {
      return make_error(ErrorCode::kTruncated, "BMP data ends before the image does (" +
                                                   std::to_string(b.size()) + " of " +
                                                   std::to_string(needed) + " bytes)");
    }
  }
  h.palette = h.bit_depth > 0 && h.bit_depth <= 8;  // 1-, 4- and 8-bit BMPs index a colour table
  h.channels = h.bit_depth == 32 ? 4 : (h.bit_depth == 8 ? 1 : 3);
  h.bit_depth = 8;
  return h;
}

Result<ImageHeader> webp_header(Bytes b) {
  if (b.size() < 30) return truncated_header("WebP");
  ImageHeader h{ImageFormat::kWebp, 0, 0, 3, 8};
  const std::string chunk(b.begin() + 12, b.begin() + 16);
  // Lossy when the image data is a "VP8 " chunk (RFC 9649); after VP8X it follows optional chunks.
  for (size_t at = 12; at + 8 <= b.size();) {
    const std::string id(b.begin() + static_cast<std::ptrdiff_t>(at),
                         b.begin() + static_cast<std::ptrdiff_t>(at) + 4);
    if (id == "VP8 " || id == "VP8L") {
      h.lossy = id == "VP8 ";
      break;
    }
    const std::uint64_t next = at + 8 + ((std::uint64_t{le32(b, at + 4)} + 1) & ~std::uint64_t{1});
    if (next <= at || next > b.size()) break;
    at = static_cast<size_t>(next);
  }
  if (chunk == "VP8 ") {
    h.width = static_cast<int>(le16(b, 26) & 0x3FFF);
    h.height = static_cast<int>(le16(b, 28) & 0x3FFF);
  } else if (chunk == "VP8L") {
    const std::uint32_t bits = le32(b, 21);
    h.width = static_cast<int>((bits & 0x3FFF) + 1);
    h.height = static_cast<int>(((bits >> 14) & 0x3FFF) + 1);
    h.channels = (bits >> 28) & 1 ? 4 : 3;
  } else if (chunk == "VP8X") {
    // Canvas width and height minus one, 24 bits each at offsets 24 and 27 (RFC 9649, 2.7).
    h.width = static_cast<int>(le24(b, 24) + 1);
    h.height = static_cast<int>(le24(b, 27) + 1);
    h.channels = (b[20] & 0x10) ? 4 : 3;
  } else {
    return make_error(ErrorCode::kCorrupt, "WebP has an unknown first chunk '" + chunk + "'");
  }
  return h;
}

Result<ImageHeader> tiff_header(Bytes b) {
  if (b.size() < 8) return truncated_header("TIFF");
  const bool little = b[0] == 'I';
  auto u16 = [&](size_t i) { return little ? le16(b, i) : be16(b, i); };
  auto u32 = [&](size_t i) { return little ? le32(b, i) : be32(b, i); };
  if (u16(2) != 42) return make_error(ErrorCode::kUnsupported, "BigTIFF is not supported");
  const size_t ifd = u32(4);
  if (ifd + 2 > b.size()) return truncated_header("TIFF");
  const size_t count = u16(ifd);
  if (ifd + 2 + count * 12 > b.size()) return truncated_header("TIFF");
  ImageHeader h{ImageFormat::kTiff, 0, 0, 1, 0};
  for (size_t k = 0; k < count; ++k) {
    const size_t e = ifd + 2 + k * 12;
    const std::uint32_t tag = u16(e);
    const std::uint32_t type = u16(e + 2);
    const std::uint32_t value = type == 3 ? u16(e + 8) : u32(e + 8);  // SHORT or LONG
    if (tag == 256) h.width = static_cast<int>(std::min<std::uint32_t>(value, INT32_MAX));
    if (tag == 257) h.height = static_cast<int>(std::min<std::uint32_t>(value, INT32_MAX));
    if (tag == 258 && u32(e + 4) == 1) h.bit_depth = static_cast<int>(value);
    if (tag == 277) h.channels = static_cast<int>(value);
    if (tag == 259) h.lossy = value == 6 || value == 7;  // old-style and new-style JPEG compression
    if (tag == 262) h.palette = value == 3;              // PhotometricInterpretation: palette colour
  }
  if (h.width <= 0 || h.height <= 0) {
    return make_error(ErrorCode::kCorrupt, "TIFF first directory has no image width/height");
  }
  if (h.bit_depth == 0) h.bit_depth = 8;
  return h;
}

}  // namespace

std::string_view image_format_name(ImageFormat format) {
  switch (format) {
    case ImageFormat::kJpeg:
      return "jpeg";
    case ImageFormat::kPng:
      return "png";
    case ImageFormat::kWebp:
      return "webp";
    case ImageFormat::kTiff:
      return "tiff";
    case ImageFormat::kBmp:
      return "bmp";
    case ImageFormat::kUnknown:
      break;
  }
  return "unknown";
}

ImageFormat sniff_format(std::span<const std::uint8_t> b) {
  auto starts = [&](std::initializer_list<int> sig) {
    if (b.size() < sig.size()) return false;
    size_t i = 0;
    for (int s : sig) {
      if (s >= 0 && b[i] != s) return false;
      ++i;
    }
    return true;
  };
  if (starts({0xFF, 0xD8, 0xFF})) return ImageFormat::kJpeg;
  if (starts({0x89, 'P', 'N', 'G', 0x0D, 0x0A, 0x1A, 0x0A})) return ImageFormat::kPng;
  if (starts({'R', 'I', 'F', 'F', -1, -1, -1, -1, 'W', 'E', 'B', 'P'})) return ImageFormat::kWebp;
  if (starts({'I', 'I', 42, 0}) || starts({'M', 'M', 0, 42}) || starts({'I', 'I', 43, 0}) ||
      starts({'M', 'M', 0, 43})) {
    return ImageFormat::kTiff;
  }
  if (starts({'B', 'M'}) && b.size() >= 18) return ImageFormat::kBmp;
  return ImageFormat::kUnknown;
}

Result<ImageHeader> read_header(std::span<const std::uint8_t> bytes) {
  if (bytes.empty()) return make_error(ErrorCode::kEmpty, "the file is empty (0 bytes)");
  Result<ImageHeader> h = make_error(ErrorCode::kInternal, "");
  switch (sniff_format(bytes)) {
    case ImageFormat::kPng:
      h = png_header(bytes);
      break;
    case ImageFormat::kJpeg:
      h = jpeg_header(bytes);
      break;
    case ImageFormat::kBmp:
      h = bmp_header(bytes);
      break;
    case ImageFormat::kWebp:
      h = webp_header(bytes);
      break;
    case ImageFormat::kTiff:
      h = tiff_header(bytes);
      break;
    case ImageFormat::kUnknown:
      return make_error(ErrorCode::kNotAnImage,
                        "not a JPEG, PNG, WebP, TIFF or BMP file (no known signature)");
  }
  if (h && (h->width <= 0 || h->height <= 0)) {
    return make_error(ErrorCode::kCorrupt, "the header gives a zero image size");
  }
  return h;
}

}  // namespace residue
