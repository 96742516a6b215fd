#include "residue/training/augment.hpp"

#include <cstdint>
#include <cstdio>

namespace residue {

namespace {

// 64 bits of the hash from hex digits [from, from + 16), wrapping round the 64 digits.
std::uint64_t hash_bits(const std::string& sha256, size_t from) {
  std::uint64_t v = 0;
  for (size_t k = 0; k < 16; ++k) {
    const char c = sha256.empty() ? '0' : sha256[(from + k) % sha256.size()];
    const int d = c >= '0' && c <= '9' ? c - '0' : (c >= 'a' && c <= 'f' ? c - 'a' + 10 : 0);
    v = v << 4U | static_cast<std::uint64_t>(d);
  }
  return v;
}

std::string quality(const char* prefix, std::uint64_t bits) {
  return prefix + std::to_string(65 + bits % 31);  // 65..95
}

// prefix + a factor in [from, from + 0.40] in steps of 0.01 (0.50..0.90 by default).
std::string fraction(const char* prefix, std::uint64_t bits, double from = 0.5) {
  char buf[48];
  std::snprintf(buf, sizeof buf, "%s%.2f", prefix, from + 0.01 * static_cast<double>(bits % 41));
  return buf;
}

// One laundering copy: a Gaussian blur (sigma 0.8..2.0 px), additive Gaussian noise (sigma
// 2..6 grey levels) or a 3 x 3 median filter, a third of the images each.
std::string laundering(std::uint64_t kind_bits, std::uint64_t parameter_bits) {
  char buf[48];
  switch (kind_bits % 3) {
    case 0:
      std::snprintf(buf, sizeof buf, "blur-%.1f", 0.8 + 0.1 * static_cast<double>(parameter_bits % 13));
      return buf;
    case 1:
      std::snprintf(buf, sizeof buf, "noise-%.1f", 2.0 + 0.5 * static_cast<double>(parameter_bits % 9));
      return buf;
    default:
      return "median-3";
  }
}

}  // namespace

std::string augment_name(Augment a) {
  switch (a) {
    case Augment::kNone:
      return "none";
    case Augment::kLight:
      return "light";
    case Augment::kFull:
      return "full";
  }
  return "none";
}

std::optional<Augment> parse_augment(const std::string& name) {
  for (Augment a : {Augment::kNone, Augment::kLight, Augment::kFull}) {
    if (augment_name(a) == name) return a;
  }
  return std::nullopt;
}

std::vector<std::string> augmentation_transforms(Augment level, const std::string& sha256) {
  std::vector<std::string> out;
  if (level == Augment::kNone) return out;
  out.push_back(quality("jpeg-q", hash_bits(sha256, 0)));
  out.push_back(fraction("downscale-", hash_bits(sha256, 16)));
  if (level == Augment::kFull) {
    out.push_back(quality("webp-q", hash_bits(sha256, 32)));
    out.push_back(fraction("crop-centre-", hash_bits(sha256, 48)));
    out.push_back(laundering(hash_bits(sha256, 8), hash_bits(sha256, 40)));
    out.push_back(fraction("upscale-", hash_bits(sha256, 24), 1.1));
  }
  return out;
}

}  // namespace residue
