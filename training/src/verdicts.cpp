// SQLite adapter for the verdict store.
#include "residue/training/verdicts.hpp"

#include <algorithm>
#include <cstdio>
#include <map>
#include <set>

#include "residue/training/carried.hpp"
#include "residue/training/trainer.hpp"
#include "sqlite_file.hpp"

namespace residue {

namespace {

using detail::Statement;

constexpr size_t kShortText = 200;
constexpr size_t kNoteText = 2000;

bool is_sha256(const std::string& s) {
  return s.size() == 64 &&
         std::ranges::all_of(s, [](char c) { return (c >= '0' && c <= '9') || (c >= 'a' && c <= 'f'); });
}

std::string column_text(sqlite3_stmt* s, int column) {
  const auto* text = sqlite3_column_text(s, column);
  return text != nullptr ? reinterpret_cast<const char*>(text) : "";
}

Verdict verdict_of_row(sqlite3_stmt* s) {
  Verdict v;
  v.id = sqlite3_column_int64(s, 0);
  v.sha256 = column_text(s, 1);
  v.verdict = column_text(s, 2);
  v.generator = column_text(s, 3);
  v.reviewer = column_text(s, 4);
  v.note = column_text(s, 5);
  v.recorded = column_text(s, 6);
  v.model = column_text(s, 7);
  v.band = column_text(s, 8);
  if (sqlite3_column_type(s, 9) != SQLITE_NULL) v.p_generated = sqlite3_column_double(s, 9);
  if (sqlite3_column_type(s, 10) != SQLITE_NULL) {
    auto j = nlohmann::json::parse(column_text(s, 10), nullptr, false);
    if (!j.is_discarded()) v.features = std::move(j);
  }
  return v;
}

nlohmann::ordered_json optional_text(const std::string& text) {
  return text.empty() ? nlohmann::ordered_json() : nlohmann::ordered_json(text);
}

constexpr const char* kColumns =
    "id, sha256, verdict, generator, reviewer, note, recorded, model, band, p_generated, features";

}  // namespace

nlohmann::ordered_json verdict_to_json(const Verdict& v, bool with_features) {
  nlohmann::ordered_json j = {
      {"id", v.id},
      {"sha256", v.sha256},
      {"verdict", v.verdict},
      {"generator", optional_text(v.generator)},
      {"reviewer", optional_text(v.reviewer)},
      {"note", optional_text(v.note)},
      {"recorded", v.recorded},
      {"model", optional_text(v.model)},
      {"band", optional_text(v.band)},
      {"p_generated", v.p_generated ? nlohmann::ordered_json(*v.p_generated) : nlohmann::ordered_json()},
      {"has_features", v.features.has_value()}};
  if (with_features && v.features) j["features"] = *v.features;
  return j;
}

Result<Verdict> verdict_from_json(const nlohmann::json& j) {
  if (!j.is_object()) return make_error(ErrorCode::kCorrupt, "a verdict must be a JSON object");
  Verdict v;
  const auto text = [&](const char* key, std::string& out, size_t limit) -> std::optional<Error> {
    if (!j.contains(key) || j[key].is_null()) return std::nullopt;
    if (!j[key].is_string()) return make_error(ErrorCode::kCorrupt, std::string(key) + " must be a string");
    out = j[key].get<std::string>();
    if (out.size() > limit) {
      return make_error(ErrorCode::kCorrupt,
                        std::string(key) + " is longer than " + std::to_string(limit) + " bytes");
    }
    return std::nullopt;
  };
  for (const auto& [key, out, limit] : {std::tuple<const char*, std::string&, size_t>{"sha256", v.sha256, 64},
                                        {"verdict", v.verdict, 16},
                                        {"generator", v.generator, kShortText},
                                        {"reviewer", v.reviewer, kShortText},
                                        {"note", v.note, kNoteText},
                                        {"recorded", v.recorded, 64},
                                        {"model", v.model, 64},
                                        {"band", v.band, 32}}) {
    if (auto e = text(key, out, limit)) return *e;
  }
  if (!is_sha256(v.sha256))
    return make_error(ErrorCode::kCorrupt, "sha256 must be 64 lower-case hexadecimal digits");
  if (v.verdict != "camera" && v.verdict != "generated")
    return make_error(ErrorCode::kCorrupt, R"(verdict must be "camera" or "generated")");
  if (v.verdict == "camera" && !v.generator.empty())
    return make_error(ErrorCode::kCorrupt, "a camera verdict names no generator");
  if (j.contains("id") && j["id"].is_number_integer()) v.id = j["id"].get<std::int64_t>();
  if (j.contains("p_generated") && !j["p_generated"].is_null()) {
    if (!j["p_generated"].is_number() || !(j["p_generated"].get<double>() >= 0.0) ||
        !(j["p_generated"].get<double>() <= 1.0))
      return make_error(ErrorCode::kCorrupt, "p_generated must be a number in [0, 1]");
    v.p_generated = j["p_generated"].get<double>();
  }
  if (j.contains("features") && !j["features"].is_null()) {
    if (!j["features"].is_object()) return make_error(ErrorCode::kCorrupt, "features must be an object");
    v.features = j["features"];
  }
  return v;
}

Result<std::unique_ptr<VerdictStore>> VerdictStore::open(const std::filesystem::path& path) {
  const char* schema =
      "PRAGMA journal_mode=WAL;"
      // A verdict is a person's work: it is on disk before the service says it is recorded.
      "PRAGMA synchronous=FULL;"
      "CREATE TABLE IF NOT EXISTS verdicts ("
      "  id INTEGER PRIMARY KEY AUTOINCREMENT, sha256 TEXT NOT NULL,"
      "  verdict TEXT NOT NULL CHECK (verdict IN ('camera', 'generated')),"
      "  generator TEXT NOT NULL DEFAULT '', reviewer TEXT NOT NULL DEFAULT '', note TEXT NOT NULL DEFAULT "
      "'',"
      "  recorded TEXT NOT NULL, model TEXT NOT NULL DEFAULT '', band TEXT NOT NULL DEFAULT '',"
      "  p_generated REAL, features TEXT);"
      "CREATE INDEX IF NOT EXISTS verdicts_by_hash ON verdicts (sha256);";
  auto db = detail::open_sqlite(path, schema, "verdict store");
  if (!db) return db.error();
  return std::unique_ptr<VerdictStore>(new VerdictStore(*db));
}

VerdictStore::~VerdictStore() { sqlite3_close(db_); }

Result<VerdictAdded> VerdictStore::add(Verdict v) {
  if (v.recorded.empty()) v.recorded = utc_now();
  VerdictAdded out;
  auto earlier = list(v.sha256);
  if (!earlier) return earlier.error();
  std::lock_guard lock(mutex_);
  Statement s;
  sqlite3_prepare_v2(
      db_,
      "INSERT INTO verdicts (sha256, verdict, generator, reviewer, note, recorded, model, band, "
      "p_generated, features) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
      -1, &s.stmt, nullptr);
  int k = 1;
  for (const std::string* t :
       {&v.sha256, &v.verdict, &v.generator, &v.reviewer, &v.note, &v.recorded, &v.model, &v.band}) {
    sqlite3_bind_text(s.stmt, k++, t->c_str(), -1, SQLITE_TRANSIENT);
  }
  if (v.p_generated) {
    sqlite3_bind_double(s.stmt, 9, *v.p_generated);
  } else {
    sqlite3_bind_null(s.stmt, 9);
  }
  const std::string features = v.features ? v.features->dump() : "";
  if (v.features) {
    sqlite3_bind_text(s.stmt, 10, features.c_str(), -1, SQLITE_TRANSIENT);
  } else {
    sqlite3_bind_null(s.stmt, 10);
  }
  if (sqlite3_step(s.stmt) != SQLITE_DONE)
    return make_error(ErrorCode::kInternal,
                      std::string("verdict store write failed: ") + sqlite3_errmsg(db_));
  v.id = sqlite3_last_insert_rowid(db_);
  out.earlier = std::move(*earlier);
  for (const auto& e : out.earlier) out.conflict = out.conflict || e.verdict != v.verdict;
  out.verdict = std::move(v);
  return out;
}

Result<std::vector<Verdict>> VerdictStore::list(const std::string& sha256) {
  std::lock_guard lock(mutex_);
  Statement s;
  const std::string sql = std::string("SELECT ") + kColumns + " FROM verdicts" +
                          (sha256.empty() ? "" : " WHERE sha256 = ?1") + " ORDER BY id";
  if (sqlite3_prepare_v2(db_, sql.c_str(), -1, &s.stmt, nullptr) != SQLITE_OK)
    return make_error(ErrorCode::kCorrupt, std::string("verdict store: ") + sqlite3_errmsg(db_));
  if (!sha256.empty()) sqlite3_bind_text(s.stmt, 1, sha256.c_str(), -1, SQLITE_TRANSIENT);
  std::vector<Verdict> out;
  int rc = 0;
  while ((rc = sqlite3_step(s.stmt)) == SQLITE_ROW) out.push_back(verdict_of_row(s.stmt));
  if (rc != SQLITE_DONE)
    return make_error(ErrorCode::kInternal, std::string("verdict store read failed: ") + sqlite3_errmsg(db_));
  return out;
}

Result<size_t> VerdictStore::remove(std::int64_t id) {
  std::lock_guard lock(mutex_);
  Statement s;
  sqlite3_prepare_v2(db_, "DELETE FROM verdicts WHERE id = ?1", -1, &s.stmt, nullptr);
  sqlite3_bind_int64(s.stmt, 1, id);
  if (sqlite3_step(s.stmt) != SQLITE_DONE)
    return make_error(ErrorCode::kInternal,
                      std::string("verdict store write failed: ") + sqlite3_errmsg(db_));
  return static_cast<size_t>(sqlite3_changes(db_));
}

Result<std::vector<std::string>> VerdictStore::conflicts() {
  std::lock_guard lock(mutex_);
  Statement s;
  sqlite3_prepare_v2(
      db_, "SELECT sha256 FROM verdicts GROUP BY sha256 HAVING COUNT(DISTINCT verdict) > 1 ORDER BY sha256",
      -1, &s.stmt, nullptr);
  std::vector<std::string> out;
  while (sqlite3_step(s.stmt) == SQLITE_ROW) out.push_back(column_text(s.stmt, 0));
  return out;
}

Result<VerdictItems> verdict_items(VerdictStore& store) {
  auto all = store.list();
  if (!all) return all.error();
  VerdictItems out;
  out.verdicts = all->size();
  std::map<std::string, std::vector<const Verdict*>> by_hash;
  std::vector<std::string> order;
  for (const auto& v : *all) {
    if (!by_hash.contains(v.sha256)) order.push_back(v.sha256);
    by_hash[v.sha256].push_back(&v);
  }
  std::string other_message;
  for (const auto& sha : order) {
    const auto& verdicts = by_hash[sha];
    std::set<std::string> kinds;
    for (const auto* v : verdicts) kinds.insert(v->verdict);
    if (kinds.size() > 1) {
      ++out.conflicts;
      continue;
    }
    const Verdict* with_vector = nullptr;
    std::string generator;
    for (const auto* v : verdicts) {
      if (v->features && with_vector == nullptr) with_vector = v;
      if (!v->generator.empty()) generator = v->generator;  // the latest name given
    }
    if (with_vector == nullptr) {
      ++out.without_vector;
      continue;
    }
    auto carried = carried_from_json(*with_vector->features);
    if (!carried) {
      ++out.other_extractor;
      if (other_message.empty()) other_message = carried.error().message;
      continue;
    }
    PreparedItem item = std::move(carried->item);
    item.sha256 = sha;
    item.file.path = "verdict:" + sha;
    item.file.label = *kinds.begin() == "camera" ? Label::kCamera : Label::kGenerated;
    item.file.generator =
        item.file.label == Label::kCamera ? "camera" : (generator.empty() ? "unnamed" : generator);
    item.file.group = "verdict:" + sha;
    item.file.folder = "verdicts";
    out.items.push_back(std::move(item));
  }
  if (out.conflicts > 0) {
    out.notes.push_back(std::to_string(out.conflicts) +
                        " images judged both camera and generated were left out: residue verdict list "
                        "--conflicts shows them, residue verdict remove ID takes the wrong verdict back");
  }
  if (out.without_vector > 0) {
    out.notes.push_back(std::to_string(out.without_vector) +
                        " judged images have no stored feature vector (verdict given by hash after the "
                        "service forgot the image, or added without the file) and were left out");
  }
  if (out.other_extractor > 0) {
    out.notes.push_back(std::to_string(out.other_extractor) +
                        " judged images were left out: " + other_message);
  }
  return out;
}

size_t VerdictAgreement::count(const std::string& verdict, const std::string& band) const {
  const auto v = counts.find(verdict);
  if (v == counts.end()) return 0;
  const auto b = v->second.find(band);
  return b == v->second.end() ? 0 : b->second;
}

void add_agreement(VerdictAgreement& agreement, const std::string& verdict, const std::string& band) {
  agreement.counts[verdict][band] += 1;
  agreement.images += 1;
}

VerdictAgreement agreement_of(const Model& model, const std::vector<PreparedItem>& judged) {
  std::set<std::string> trained;
  const nlohmann::json provenance =
      model.provenance.is_object() ? nlohmann::json(model.provenance) : nlohmann::json::object();
  for (const auto& h : provenance.value("training_files", nlohmann::json::array()))
    trained.insert(h.get<std::string>());
  VerdictAgreement out;
  for (const auto& it : judged) {
    if (trained.contains(training_file_key(it.sha256))) {
      ++out.trained_on;
      continue;
    }
    const Score s = score(model, it.features, std::nullopt, &it.facts.processing);
    add_agreement(out, it.file.label == Label::kCamera ? "camera" : "generated", s.band);
  }
  return out;
}

nlohmann::ordered_json agreement_to_json(const VerdictAgreement& a) {
  nlohmann::ordered_json table = nlohmann::ordered_json::object();
  for (const char* verdict : {"camera", "generated"}) {
    nlohmann::ordered_json row = nlohmann::ordered_json::object();
    for (const char* band : {"likely-camera", "inconclusive", "likely-generated"})
      row[band] = a.count(verdict, band);
    table[verdict] = row;
  }
  return {{"images", a.images},
          {"left_out_trained_on", a.trained_on},
          {"by_verdict", table},
          {"camera_judged_in_likely_generated", a.count("camera", "likely-generated")},
          {"generated_judged_in_likely_camera", a.count("generated", "likely-camera")}};
}

std::string agreement_to_text(const VerdictAgreement& a) {
  char line[200];
  std::string out;
  std::snprintf(line, sizeof line, "  %-20s %14s %14s %17s\n", "verdict \\ band", "likely-camera",
                "inconclusive", "likely-generated");
  out += line;
  for (const char* verdict : {"camera", "generated"}) {
    std::snprintf(line, sizeof line, "  %-20s %14zu %14zu %17zu\n", verdict,
                  a.count(verdict, "likely-camera"), a.count(verdict, "inconclusive"),
                  a.count(verdict, "likely-generated"));
    out += line;
  }
  out += "  " + std::to_string(a.count("camera", "likely-generated")) +
         " judged camera photos were in likely-generated (people wrongly suspected), " +
         std::to_string(a.count("generated", "likely-camera")) +
         " judged generated images in likely-camera (fakes waved through)";
  if (a.trained_on > 0)
    out += "; " + std::to_string(a.trained_on) + " judged images the model trained on are left out";
  return out + ".\n";
}

std::string verdicts_used_text(const Model& model) {
  const nlohmann::json p =
      model.provenance.is_object() ? nlohmann::json(model.provenance) : nlohmann::json::object();
  const auto trained = p.value("verdicts", nlohmann::json::object());
  const auto calibrated = p.value("calibration_verdicts", nlohmann::json::object());
  const size_t added = trained.value("images_added", size_t{0});
  const size_t cal =
      calibrated.value("camera_images", size_t{0}) + calibrated.value("generated_images", size_t{0});
  return "trained on " + std::to_string(added) + " judged images" +
         (trained.empty() ? std::string(" (no verdicts)") : " from " + trained.value("file", std::string())) +
         ", calibrated on " + std::to_string(cal) +
         (calibrated.empty() ? std::string(" (no verdicts)")
                             : " from " + calibrated.value("file", std::string()));
}

}  // namespace residue
