// Groups for cross-validation: files that must stay on the same side of every split (exact and
// near duplicates, and whatever the user declares belongs together), and the folds built from them.
#pragma once

#include <string>
#include <vector>

#include "residue/training/prepare.hpp"

namespace residue {

enum class GroupBy {
  kDuplicates,  // exact (same SHA-256) and near duplicates (difference hash within the radius)
  kFolder,      // the file's folder, joined with duplicates
  kManifest,    // the manifest's group column (files without one stand alone), joined with duplicates
};

inline constexpr int kNearDuplicateRadius = 4;  // bits of 64; common practice for dHash is <= 5

// Group id (0..k-1) of each item. Union-find over the chosen relation.
std::vector<int> assign_groups(const std::vector<PreparedItem>& items, GroupBy by);

// Pairs (i, j), i < j, of items that are exact or near duplicates.
std::vector<std::pair<size_t, size_t>> duplicate_pairs(const std::vector<PreparedItem>& items);

// Splits groups into k folds: groups taken largest first, each into the fold holding the fewest
// items of the group's majority label (ties: fewest items), so both labels spread over the folds.
// Returns the fold (0..k-1) of each item. A group is never split.
std::vector<int> grouped_folds(const std::vector<int>& groups, const std::vector<int>& labels, int k);

}  // namespace residue
