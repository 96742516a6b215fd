// Training-time augmentation (Wang et al. 2020, "CNN-generated images are surprisingly easy to
// spot... for now": training on processed copies is what makes a detector survive processing).
// Each training image is also seen processed the way platforms process uploads, in both classes
// alike; the copies stay in their image's group, so no fold ever splits an image from its copies.
//
// The processing of each copy is drawn from the image's content hash, so a file always gets the
// same copies (reproducible, and cacheable under (file hash, transform)).
#pragma once

#include <optional>
#include <string>
#include <vector>

namespace residue {

enum class Augment {
  kNone,   // the images as they are
  kLight,  // + a JPEG recompression (quality 65-95) and a downscale (0.5-0.9, area filter)
  kFull,   // + a lossy WebP (quality 65-95), a centre crop (0.5-0.9 of each side) and one laundering
           //   copy: Gaussian blur (sigma 0.8-2.0), added Gaussian noise (sigma 2-6) or a 3 x 3 median;
           //   and a bicubic upscale (1.1-1.5)
};

std::string augment_name(Augment a);
std::optional<Augment> parse_augment(const std::string& name);

// The transform names (transforms.hpp) of an image's copies, drawn from its SHA-256 (hex).
std::vector<std::string> augmentation_transforms(Augment level, const std::string& sha256);

}  // namespace residue
