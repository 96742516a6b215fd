// Simulated cached vectors for the training tests (the tests' own, not data): `n` images, one in
// three generated, every value N(0, 1) with `shift` added to every `every`-th value of the
// generated ones; `windows` window vectors each (the image's plus N(0, 0.3) noise).
#pragma once

#include <random>
#include <string>
#include <vector>

#include "residue/training/prepare.hpp"

namespace residue::test {

inline std::vector<PreparedItem> simulated_items(size_t n, unsigned seed, size_t every, double shift,
                                                 int windows = 0) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> noise(0.0, 1.0);
  const size_t d = feature_names().size();
  std::vector<PreparedItem> items(n);
  for (size_t i = 0; i < items.size(); ++i) {
    PreparedItem& it = items[i];
    const bool generated = i % 3 == 0;
    it.file.label = generated ? Label::kGenerated : Label::kCamera;
    it.file.generator = generated ? "simulated" : "camera";
    it.file.path = std::to_string(i) + ".png";
    it.sha256 = std::to_string(i);
    it.facts.dhash = rng();
    it.features.values.resize(d);
    for (size_t j = 0; j < d; ++j)
      it.features.values[j] = noise(rng) + (generated && j % every == 0 ? shift : 0.0);
    for (int w = 0; w < windows; ++w) {
      auto v = it.features.values;
      for (double& x : v) x += 0.3 * noise(rng);
      it.features.windows.push_back(std::move(v));
    }
  }
  return items;
}

}  // namespace residue::test
