// What the service remembers of the images it scored, so that a reviewer's verdict can be recorded
// with the image's feature vector after the image itself is gone: the last N records' carried
// features (carried.hpp, about 10.5 KB of data each), with the model and band they got, keyed by SHA-256.
// Least recently scored entries are forgotten first. Thread-safe.
#pragma once

#include <cstddef>
#include <list>
#include <mutex>
#include <optional>
#include <string>
#include <unordered_map>

namespace residue {

struct Remembered {
  std::string features;  // the record's "features" member, as JSON text
  std::string model;
  std::string band;
  double p_generated = 0.0;
};

class VectorMemory {
 public:
  explicit VectorMemory(std::size_t capacity) : capacity_(capacity) {}
  void put(const std::string& sha256, Remembered entry);
  std::optional<Remembered> find(const std::string& sha256);
  [[nodiscard]] std::size_t size();
  // Bytes held by the entries' strings and keys (not counting the containers' own nodes, about 100
  // bytes each).
  [[nodiscard]] std::size_t bytes();
  [[nodiscard]] std::size_t capacity() const { return capacity_; }

 private:
  std::size_t capacity_;
  std::mutex mutex_;
  std::list<std::pair<std::string, Remembered>> order_;  // most recent first
  std::unordered_map<std::string, std::list<std::pair<std::string, Remembered>>::iterator> index_;
  std::size_t bytes_ = 0;
  std::size_t puts_ = 0;
};

}  // namespace residue
