#include "residue/training/groups.hpp"

#include <algorithm>
#include <map>
#include <numeric>

#include "residue/features/fingerprint.hpp"

namespace residue {

namespace {

struct UnionFind {
  std::vector<size_t> parent;
  explicit UnionFind(size_t n) : parent(n) { std::iota(parent.begin(), parent.end(), 0); }
  size_t find(size_t i) {
    while (parent[i] != i) i = parent[i] = parent[parent[i]];
    return i;
  }
  void join(size_t a, size_t b) { parent[find(a)] = find(b); }
};

}  // namespace

std::vector<std::pair<size_t, size_t>> duplicate_pairs(const std::vector<PreparedItem>& items) {
  std::vector<std::pair<size_t, size_t>> pairs;
  for (size_t i = 0; i < items.size(); ++i) {
    for (size_t j = i + 1; j < items.size(); ++j) {
      if (items[i].sha256 == items[j].sha256 ||
          hamming_distance(items[i].facts.dhash, items[j].facts.dhash) <= kNearDuplicateRadius) {
        pairs.emplace_back(i, j);
      }
    }
  }
  return pairs;
}

std::vector<int> assign_groups(const std::vector<PreparedItem>& items, GroupBy by) {
  UnionFind uf(items.size());
  for (const auto& [i, j] : duplicate_pairs(items)) uf.join(i, j);
  if (by != GroupBy::kDuplicates) {
    std::map<std::string, size_t> first;
    for (size_t i = 0; i < items.size(); ++i) {
      const std::string& key = by == GroupBy::kFolder ? items[i].file.folder : items[i].file.group;
      if (key.empty()) continue;
      const auto [it, inserted] = first.emplace(key, i);
      if (!inserted) uf.join(i, it->second);
    }
  }
  std::map<size_t, int> ids;
  std::vector<int> groups(items.size());
  for (size_t i = 0; i < items.size(); ++i) {
    groups[i] = ids.emplace(uf.find(i), static_cast<int>(ids.size())).first->second;
  }
  return groups;
}

std::vector<int> grouped_folds(const std::vector<int>& groups, const std::vector<int>& labels, int k) {
  const int n_groups = groups.empty() ? 0 : *std::max_element(groups.begin(), groups.end()) + 1;
  std::vector<int> size(n_groups, 0), positives(n_groups, 0);
  for (size_t i = 0; i < groups.size(); ++i) {
    ++size[groups[i]];
    positives[groups[i]] += labels[i] != 0;
  }
  std::vector<int> order(n_groups);
  std::iota(order.begin(), order.end(), 0);
  std::stable_sort(order.begin(), order.end(), [&](int a, int b) { return size[a] > size[b]; });
  std::vector<int> fold_of_group(n_groups, 0);
  std::vector<int> fold_size(k, 0), fold_pos(k, 0), fold_neg(k, 0);
  for (int g : order) {
    const bool mostly_generated = 2 * positives[g] >= size[g];
    int best = 0;
    for (int f = 1; f < k; ++f) {
      const int load_f = mostly_generated ? fold_pos[f] : fold_neg[f];
      const int load_b = mostly_generated ? fold_pos[best] : fold_neg[best];
      if (load_f < load_b || (load_f == load_b && fold_size[f] < fold_size[best])) best = f;
    }
    fold_of_group[g] = best;
    fold_size[best] += size[g];
    fold_pos[best] += positives[g];
    fold_neg[best] += size[g] - positives[g];
  }
  std::vector<int> folds(groups.size());
  for (size_t i = 0; i < groups.size(); ++i) folds[i] = fold_of_group[groups[i]];
  return folds;
}

}  // namespace residue
