#include "residue/features/fingerprint.hpp"

#include <openssl/evp.h>

#include <bit>
#include <cstdio>

namespace residue {

std::string sha256_hex(std::span<const std::uint8_t> bytes) {
  unsigned char digest[EVP_MAX_MD_SIZE];
  unsigned int length = 0;
  EVP_Digest(bytes.data(), bytes.size(), digest, &length, EVP_sha256(), nullptr);
  std::string hex;
  hex.reserve(2 * static_cast<size_t>(length));
  char buf[3];
  for (unsigned int i = 0; i < length; ++i) {
    std::snprintf(buf, sizeof buf, "%02x", digest[i]);
    hex.append(buf, 2);
  }
  return hex;
}

std::uint64_t difference_hash(const Image& image) {
  const auto y = luma(image);
  double cells[8][9] = {};
  for (int r = 0; r < 8; ++r) {
    const int y0 = r * image.height / 8;
    const int y1 = std::max(y0 + 1, (r + 1) * image.height / 8);
    for (int c = 0; c < 9; ++c) {
      const int x0 = c * image.width / 9;
      const int x1 = std::max(x0 + 1, (c + 1) * image.width / 9);
      double sum = 0.0;
      for (int yy = y0; yy < y1; ++yy) {
        for (int xx = x0; xx < x1; ++xx) sum += y[static_cast<size_t>(yy) * image.width + xx];
      }
      cells[r][c] = sum / ((y1 - y0) * (x1 - x0));
    }
  }
  std::uint64_t hash = 0;
  for (int r = 0; r < 8; ++r) {
    for (int c = 0; c < 8; ++c) {
      if (cells[r][c] > cells[r][c + 1]) hash |= std::uint64_t{1} << (r * 8 + c);
    }
  }
  return hash;
}

std::uint64_t fnv1a_64(std::string_view text) {
  std::uint64_t h = 1469598103934665603ULL;                     // offset basis
  for (unsigned char c : text) h = (h ^ c) * 1099511628211ULL;  // FNV prime
  return h;
}

int hamming_distance(std::uint64_t a, std::uint64_t b) { return std::popcount(a ^ b); }

}  // namespace residue
