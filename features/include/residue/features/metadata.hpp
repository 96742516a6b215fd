// Declared provenance read from a file's metadata (exiv2): reported beside the score and
// audited, never learned.
#pragma once

#include <cstdint>
#include <span>
#include <string>
#include <vector>

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
  // A C2PA manifest store is present: a JUMBF box labelled "c2pa" in a JPEG APP11 segment, or the
  // PNG "caBX" chunk (C2PA specification 1.x, "Embedding manifests"). Presence only: the
  // manifest's signature is not validated.
  bool c2pa_manifest = false;
  bool readable = true;  // false when exiv2 could not parse the container
};

DeclaredMetadata read_metadata(std::span<const std::uint8_t> bytes);

// A copy of an image file with Xmp.iptcExt.DigitalSourceType set to the IPTC NewsCodes URI of
// `type` (e.g. "trainedAlgorithmicMedia"), written by exiv2. For the demo and tests.
std::vector<std::uint8_t> with_digital_source_type(std::span<const std::uint8_t> bytes,
                                                   const std::string& type);

// True for the IPTC NewsCodes digital source types that declare algorithmic or AI generation
// (trainedAlgorithmicMedia, compositeWithTrainedAlgorithmicMedia, algorithmicMedia,
// compositeSynthetic); false for digitalCapture and the rest.
bool declares_generated(const std::string& digital_source_type);

}  // namespace residue
