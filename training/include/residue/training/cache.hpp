// Feature cache: an SQLite file keyed by (content SHA-256, extractor version), so a retrain
// re-extracts only new or changed files. Augmented copies are keyed "SHA-256:transform". Each row
// holds the image's vector and its windows' vectors. Thread-safe (one serialised connection).
#pragma once

#include <filesystem>
#include <memory>
#include <mutex>
#include <optional>
#include <string>

#include "residue/features/status.hpp"
#include "residue/training/prepare.hpp"

struct sqlite3;

namespace residue {

class FeatureCache {
 public:
  static Result<std::unique_ptr<FeatureCache>> open(const std::filesystem::path& path);
  ~FeatureCache();
  FeatureCache(const FeatureCache&) = delete;
  FeatureCache& operator=(const FeatureCache&) = delete;

  struct Entry {
    FileFacts facts;
    FeatureVector features;
  };
  // The entry for this content under the current extractor version, if stored.
  std::optional<Entry> find(const std::string& sha256);
  Result<bool> store(const std::string& sha256, const Entry& entry);
  // Writes that failed so far (a full disk, a file size limit) and the first one's reason: a cache
  // that cannot grow is no reason to stop training, but the user should hear of it once.
  size_t failed_writes();
  std::string first_write_failure();
  // Number of entries for the current extractor version.
  size_t size();

 private:
  explicit FeatureCache(sqlite3* db) : db_(db) {}
  sqlite3* db_;
  std::mutex mutex_;
  size_t failed_writes_ = 0;
  std::string first_write_failure_;
};

}  // namespace residue
