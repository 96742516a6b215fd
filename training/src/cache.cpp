// SQLite adapter for the feature cache.
#include "residue/training/cache.hpp"

#include <cstring>
#include <nlohmann/json.hpp>

#include "sqlite_file.hpp"

namespace residue {

namespace {

// The key's version part: extractor, schema and the blob layout ("w": with the window vectors).
std::string cache_version() { return std::string(kExtractorVersion) + "/" + feature_schema_id() + "/w"; }

using detail::Statement;

}  // namespace

Result<std::unique_ptr<FeatureCache>> FeatureCache::open(const std::filesystem::path& path) {
  const char* schema =
      "PRAGMA journal_mode=WAL;"
      // A cache: losing the last writes on power loss costs a re-extraction, so no fsync per row
      // (with FULL, each stored vector waited for the disk: 10,000 images took 193 s instead of 115 s).
      "PRAGMA synchronous=NORMAL;"
      "CREATE TABLE IF NOT EXISTS vectors ("
      "  sha256 TEXT NOT NULL, extractor TEXT NOT NULL, facts TEXT NOT NULL, features BLOB NOT NULL,"
      "  PRIMARY KEY (sha256, extractor));";
  auto db = detail::open_sqlite(path, schema, "feature cache");
  if (!db) return db.error();
  return std::unique_ptr<FeatureCache>(new FeatureCache(*db));
}

FeatureCache::~FeatureCache() { sqlite3_close(db_); }

std::optional<FeatureCache::Entry> FeatureCache::find(const std::string& sha256) {
  std::lock_guard lock(mutex_);
  Statement s;
  sqlite3_prepare_v2(db_, "SELECT facts, features FROM vectors WHERE sha256 = ?1 AND extractor = ?2", -1,
                     &s.stmt, nullptr);
  const std::string version = cache_version();
  sqlite3_bind_text(s.stmt, 1, sha256.c_str(), -1, SQLITE_TRANSIENT);
  sqlite3_bind_text(s.stmt, 2, version.c_str(), -1, SQLITE_TRANSIENT);
  if (sqlite3_step(s.stmt) != SQLITE_ROW) return std::nullopt;
  Entry e;
  try {
    e.facts = file_facts_from_json(
        nlohmann::json::parse(reinterpret_cast<const char*>(sqlite3_column_text(s.stmt, 0))));
  } catch (const std::exception&) {
    return std::nullopt;  // a damaged row is re-extracted
  }
  // The blob: the image's vector, then each window's vector (extract.hpp), doubles.
  const auto bytes = static_cast<size_t>(sqlite3_column_bytes(s.stmt, 1));
  const size_t row = feature_names().size() * sizeof(double);
  if (bytes < row || bytes % row != 0) return std::nullopt;
  const auto* blob = static_cast<const char*>(sqlite3_column_blob(s.stmt, 1));
  e.features.values.resize(feature_names().size());
  std::memcpy(e.features.values.data(), blob, row);
  e.features.windows.assign(bytes / row - 1, std::vector<double>(feature_names().size()));
  for (size_t w = 0; w < e.features.windows.size(); ++w)
    std::memcpy(e.features.windows[w].data(), blob + (w + 1) * row, row);
  return e;
}

Result<bool> FeatureCache::store(const std::string& sha256, const Entry& entry) {
  std::lock_guard lock(mutex_);
  Statement s;
  sqlite3_prepare_v2(
      db_, "INSERT OR REPLACE INTO vectors (sha256, extractor, facts, features) VALUES (?1, ?2, ?3, ?4)", -1,
      &s.stmt, nullptr);
  const std::string version = cache_version();
  const std::string facts = file_facts_to_json(entry.facts).dump();
  sqlite3_bind_text(s.stmt, 1, sha256.c_str(), -1, SQLITE_TRANSIENT);
  sqlite3_bind_text(s.stmt, 2, version.c_str(), -1, SQLITE_TRANSIENT);
  sqlite3_bind_text(s.stmt, 3, facts.c_str(), -1, SQLITE_TRANSIENT);
  std::vector<double> blob = entry.features.values;
  for (const auto& w : entry.features.windows) {
    if (w.size() == entry.features.values.size()) blob.insert(blob.end(), w.begin(), w.end());
  }
  sqlite3_bind_blob(s.stmt, 4, blob.data(), static_cast<int>(blob.size() * sizeof(double)), SQLITE_TRANSIENT);
  if (sqlite3_step(s.stmt) != SQLITE_DONE) {
    const std::string message = std::string("feature cache write failed: ") + sqlite3_errmsg(db_);
    if (failed_writes_++ == 0) first_write_failure_ = message;
    return make_error(ErrorCode::kInternal, message);
  }
  return true;
}

size_t FeatureCache::failed_writes() {
  std::lock_guard lock(mutex_);
  return failed_writes_;
}

std::string FeatureCache::first_write_failure() {
  std::lock_guard lock(mutex_);
  return first_write_failure_;
}

size_t FeatureCache::size() {
  std::lock_guard lock(mutex_);
  Statement s;
  sqlite3_prepare_v2(db_, "SELECT COUNT(*) FROM vectors WHERE extractor = ?1", -1, &s.stmt, nullptr);
  const std::string version = cache_version();
  sqlite3_bind_text(s.stmt, 1, version.c_str(), -1, SQLITE_TRANSIENT);
  return sqlite3_step(s.stmt) == SQLITE_ROW ? static_cast<size_t>(sqlite3_column_int64(s.stmt, 0)) : 0;
}

}  // namespace residue
