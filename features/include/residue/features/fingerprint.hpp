// File and picture fingerprints: SHA-256 of the bytes (exact duplicates, cache keys) and a 64-bit
// difference hash of the picture (near duplicates: recompressed or re-saved copies).
#pragma once

#include <cstdint>
#include <span>
#include <string>
#include <string_view>

#include "residue/features/image.hpp"

namespace residue {

// Lower-case hex SHA-256 (FIPS 180-4) of `bytes`, via OpenSSL.
std::string sha256_hex(std::span<const std::uint8_t> bytes);

// Difference hash (Krawetz 2013, "Kind of like that"): the luma averaged over a 9 x 8 grid of
// equal areas; bit (row * 8 + col) is set when cell (row, col) is brighter than cell (row, col+1).
std::uint64_t difference_hash(const Image& image);

// 64-bit FNV-1a (Fowler, Noll & Vo) of a string: a fast, stable, non-cryptographic hash for
// schema ids and shard assignment.
std::uint64_t fnv1a_64(std::string_view text);

// Number of differing bits.
int hamming_distance(std::uint64_t a, std::uint64_t b);

}  // namespace residue
