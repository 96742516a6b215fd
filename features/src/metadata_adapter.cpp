// exiv2 adapter: the only file that includes exiv2.
#include <algorithm>
#include <exiv2/exiv2.hpp>
#include <mutex>

#include "residue/features/metadata.hpp"

namespace residue {

namespace {

// Exiv2's XMP toolkit is not thread-safe: XmpParser::initialize must run once before threads parse
// XMP, given a lock that serialises the toolkit's calls (exiv2's documentation of
// XmpParser::initialize). Without it, two threads reading XMP packets at once crashed in
// initialize (seen in cli.scan_report_explain: two tagged PNGs scanned on two threads).
std::mutex xmp_mutex;

void lock_xmp(void* /*unused*/, bool lock) {
  if (lock) {
    xmp_mutex.lock();
  } else {
    xmp_mutex.unlock();
  }
}

void initialise_xmp() {
  static std::once_flag once;
  std::call_once(once, [] { Exiv2::XmpParser::initialize(lock_xmp, nullptr); });
}

bool looks_like_generation_settings(const std::string& text) {
  static const char* const kMarkers[] = {
      "parameters", "prompt", "Steps:", "Sampler:", "workflow", "Negative prompt"};
  return std::any_of(std::begin(kMarkers), std::end(kMarkers),
                     [&](const char* m) { return text.find(m) != std::string::npos; });
}

// Keywords and (uncompressed) text of a PNG's tEXt and iTXt chunks, walked by the chunk layout
// of ISO/IEC 15948 section 5.3; exiv2 keeps only the ones it knows (XMP, EXIF, comments).
std::string png_text(std::span<const std::uint8_t> b) {
  std::string text;
  size_t i = 8;
  while (i + 12 <= b.size()) {
    const size_t length =
        (size_t{b[i]} << 24) | (size_t{b[i + 1]} << 16) | (size_t{b[i + 2]} << 8) | b[i + 3];
    const std::string type(b.begin() + static_cast<std::ptrdiff_t>(i + 4),
                           b.begin() + static_cast<std::ptrdiff_t>(i + 8));
    if (i + 12 + length > b.size()) break;
    if (type == "tEXt" || type == "iTXt" || type == "zTXt") {
      const auto* start = b.data() + i + 8;
      text.append(reinterpret_cast<const char*>(start), std::min<size_t>(length, 4096));
      text.push_back('\n');
    }
    if (type == "IEND") break;
    i += 12 + length;
  }
  return text;
}

bool has_c2pa(std::span<const std::uint8_t> b) {
  if (b.size() > 8 && b[0] == 0x89 && b[1] == 'P') {
    size_t i = 8;
    while (i + 12 <= b.size()) {
      const size_t length =
          (size_t{b[i]} << 24) | (size_t{b[i + 1]} << 16) | (size_t{b[i + 2]} << 8) | b[i + 3];
      if (std::equal(b.begin() + static_cast<std::ptrdiff_t>(i + 4),
                     b.begin() + static_cast<std::ptrdiff_t>(i + 8), "caBX")) {
        return true;
      }
      if (length > b.size()) break;
      i += 12 + length;
    }
    return false;
  }
  if (b.size() > 4 && b[0] == 0xFF && b[1] == 0xD8) {
    size_t i = 2;
    while (i + 4 <= b.size() && b[i] == 0xFF) {
      const std::uint8_t marker = b[i + 1];
      if (marker == 0xDA || marker == 0xD9) break;  // image data: no more metadata segments
      const size_t length = (size_t{b[i + 2]} << 8) | b[i + 3];
      if (marker == 0xEB && i + 2 + length <= b.size()) {
        const std::string_view payload(reinterpret_cast<const char*>(b.data() + i + 4), length - 2);
        if (payload.find("jumb") != std::string_view::npos &&
            payload.find("c2pa") != std::string_view::npos) {
          return true;
        }
      }
      i += 2 + length;
    }
  }
  return false;
}

std::string value_of(const Exiv2::ExifData& exif, const char* key) {
  const auto it = exif.findKey(Exiv2::ExifKey(key));
  return it == exif.end() ? std::string() : it->toString();
}

}  // namespace

std::vector<std::uint8_t> with_digital_source_type(std::span<const std::uint8_t> bytes,
                                                   const std::string& type) {
  initialise_xmp();
  try {
    auto image = Exiv2::ImageFactory::open(bytes.data(), static_cast<long>(bytes.size()));
    image->readMetadata();
    Exiv2::XmpData xmp = image->xmpData();
    xmp["Xmp.iptcExt.DigitalSourceType"] = "http://cv.iptc.org/newscodes/digitalsourcetype/" + type;
    image->setXmpData(xmp);
    image->writeMetadata();
    Exiv2::BasicIo& io = image->io();
    io.seek(0, Exiv2::BasicIo::beg);
    const auto size = static_cast<size_t>(io.size());
    std::vector<std::uint8_t> out(size);
    io.read(out.data(), static_cast<long>(size));
    return out;
  } catch (const std::exception&) {
    return {bytes.begin(), bytes.end()};
  }
}

bool declares_generated(const std::string& digital_source_type) {
  const std::string& t = digital_source_type;
  return t == "trainedAlgorithmicMedia" || t == "compositeWithTrainedAlgorithmicMedia" ||
         t == "algorithmicMedia" || t == "compositeSynthetic";
}

DeclaredMetadata read_metadata(std::span<const std::uint8_t> bytes) {
  DeclaredMetadata out;
  out.c2pa_manifest = has_c2pa(bytes);
  initialise_xmp();
  try {
    Exiv2::LogMsg::setLevel(Exiv2::LogMsg::mute);
    auto image = Exiv2::ImageFactory::open(bytes.data(), static_cast<long>(bytes.size()));
    if (image.get() == nullptr) {
      out.readable = false;
      return out;
    }
    image->readMetadata();
    const auto& exif = image->exifData();
    out.has_exif = !exif.empty();
    out.camera_make = value_of(exif, "Exif.Image.Make");
    out.camera_model = value_of(exif, "Exif.Image.Model");
    const auto& xmp = image->xmpData();
    out.has_xmp = !xmp.empty();
    const auto dst = xmp.findKey(Exiv2::XmpKey("Xmp.iptcExt.DigitalSourceType"));
    if (dst != xmp.end()) {
      const std::string uri = dst->toString();
      out.digital_source_type = uri.substr(uri.find_last_of('/') + 1);
    }
    out.generation_text = looks_like_generation_settings(image->comment());
    if (image->imageType() == Exiv2::ImageType::png) {
      out.generation_text = out.generation_text || looks_like_generation_settings(png_text(bytes));
    }
  } catch (const std::exception&) {
    out.readable = false;
  }
  return out;
}

}  // namespace residue
