// Declared provenance read from a file's metadata (exiv2): reported beside the score and
// audited, never learned.
#pragma once

#include <cstdint>
#include <span>
#include <string>

namespace residue {

struct DeclaredMetadata {
  bool has_exif = false;
  std::string camera_make;   // Exif.Image.Make
  std::string camera_model;  // Exif.Image.Model
  bool has_xmp = false;
  // IPTC Digital Source Type (Xmp.iptcExt.DigitalSourceType), the term after the last '/',
  // e.g. "trainedAlgorithmicMedia", "digitalCapture"; empty when absent.
  std::string digital_source_type;
  // PNG text chunks whose keyword or text looks like generation settings ("parameters",
  // "prompt", "Steps:", "Sampler:", "workflow").
  bool generation_text = false;
  bool readable = true;  // false when exiv2 could not parse the container
};

DeclaredMetadata read_metadata(std::span<const std::uint8_t> bytes);

}  // namespace residue
