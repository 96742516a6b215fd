// Shared by the SQLite files of training/ (the feature cache, the verdict store): opening one with
// its schema, and a statement that finalises itself.
#pragma once

#include <sqlite3.h>

#include <filesystem>
#include <string>

#include "residue/features/status.hpp"

namespace residue::detail {

struct Statement {
  sqlite3_stmt* stmt = nullptr;
  ~Statement() { sqlite3_finalize(stmt); }
};

// Opens (creating) the file as `what` ("feature cache", "verdict store") for reading and writing,
// serialised across threads, and runs `schema` on it. The connection, or an error naming the file.
inline Result<sqlite3*> open_sqlite(const std::filesystem::path& path, const char* schema,
                                    const std::string& what) {
  sqlite3* db = nullptr;
  const int rc = sqlite3_open_v2(path.c_str(), &db,
                                 SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE | SQLITE_OPEN_FULLMUTEX, nullptr);
  if (rc != SQLITE_OK) {
    std::string message = db != nullptr ? sqlite3_errmsg(db) : "out of memory";
    sqlite3_close(db);
    return make_error(ErrorCode::kUnreadable, "cannot open " + what + " " + path.string() + ": " + message);
  }
  sqlite3_busy_timeout(db, 10000);  // other processes writing the same file: wait for them
  char* err = nullptr;
  if (sqlite3_exec(db, schema, nullptr, nullptr, &err) != SQLITE_OK) {
    std::string message = err != nullptr ? err : "unknown error";
    sqlite3_free(err);
    sqlite3_close(db);
    return make_error(ErrorCode::kCorrupt, what + " " + path.string() + " is not usable: " + message);
  }
  return db;
}

}  // namespace residue::detail
