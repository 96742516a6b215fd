// Reviewers' verdicts: what a person decided about an image ("camera" or "generated", often with
// the generator), kept with the image's feature vector when it is known, so that a model can be
// retrained or recalibrated on them after the image itself is gone.
//
// An SQLite file (WAL, synchronous FULL: a verdict is on disk before it is acknowledged, and
// several processes may write at once, each waiting up to 10 s for the others). The same SHA-256
// judged twice keeps both verdicts; a hash judged both camera and generated is a conflict, reported
// and never resolved silently (training leaves it out until a person removes the wrong verdict).
#pragma once

#include <cstdint>
#include <filesystem>
#include <map>
#include <memory>
#include <mutex>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "residue/features/status.hpp"
#include "residue/training/model.hpp"
#include "residue/training/prepare.hpp"

struct sqlite3;

namespace residue {

struct Verdict {
  std::int64_t id = 0;    // assigned by the store
  std::string sha256;     // of the image file (64 lower-case hex digits)
  std::string verdict;    // "camera" or "generated"
  std::string generator;  // optional: the generator the reviewer named
  std::string reviewer;   // optional: a reference to the reviewer (not a name is best)
  std::string note;       // optional
  std::string recorded;   // UTC, ISO 8601; set by the store when empty
  std::string model;      // optional: the model whose record the reviewer judged
  std::string band;       // optional: the band that model gave
  std::optional<double> p_generated;
  std::optional<nlohmann::json> features;  // the carried "features" member (carried.hpp), when known
};

// One verdict as a JSON object (export lines, service answers), and back. from_json checks every
// member (kCorrupt with the reason): sha256 64 hex digits, verdict camera|generated, text members
// strings of bounded length (generator and reviewer 200 bytes, note 2000), p_generated in [0, 1].
nlohmann::ordered_json verdict_to_json(const Verdict& verdict, bool with_features = true);
Result<Verdict> verdict_from_json(const nlohmann::json& json);

struct VerdictAdded {
  Verdict verdict;               // as stored (id, recorded)
  std::vector<Verdict> earlier;  // earlier verdicts on the same hash
  bool conflict = false;         // an earlier verdict disagrees
};

class VerdictStore {
 public:
  static Result<std::unique_ptr<VerdictStore>> open(const std::filesystem::path& path);
  ~VerdictStore();
  VerdictStore(const VerdictStore&) = delete;
  VerdictStore& operator=(const VerdictStore&) = delete;

  // Stores the verdict (committed to disk when this returns).
  Result<VerdictAdded> add(Verdict verdict);
  // Every verdict, oldest first; only those on `sha256` when given.
  Result<std::vector<Verdict>> list(const std::string& sha256 = "");
  // Removes one verdict by id; 0 when there was none.
  Result<size_t> remove(std::int64_t id);
  // Hashes judged both camera and generated.
  Result<std::vector<std::string>> conflicts();

 private:
  explicit VerdictStore(sqlite3* db) : db_(db) {}
  sqlite3* db_;
  std::mutex mutex_;
};

// The judged images as training items: one per hash with a stored vector, labelled by its
// verdicts (generated ones under the generator named, or "unnamed"), each its own group
// ("verdict:<sha256>"). Left out, and counted with the reason: conflicts, verdicts without a
// vector, vectors from another extractor or schema.
struct VerdictItems {
  std::vector<PreparedItem> items;
  size_t verdicts = 0;  // read
  size_t conflicts = 0;
  size_t without_vector = 0;
  size_t other_extractor = 0;
  std::vector<std::string> notes;  // one line per kind of omission
};
Result<VerdictItems> verdict_items(VerdictStore& store);

// How bands agreed with reviewers' verdicts: judged images counted by (verdict, band). A camera
// verdict in likely-generated is a person wrongly suspected; a generated verdict in likely-camera a
// fake waved through.
struct VerdictAgreement {
  std::map<std::string, std::map<std::string, size_t>> counts;  // verdict -> band -> images
  size_t images = 0;
  size_t trained_on = 0;  // judged images the model trained on: left out (their scores are in-sample)
  [[nodiscard]] size_t count(const std::string& verdict, const std::string& band) const;
};

// The model's bands on the judged images' stored vectors (scored as scan scores them, guards
// included), leaving out those it trained on.
VerdictAgreement agreement_of(const Model& model, const std::vector<PreparedItem>& judged);
// One judged image with the band a record gave it.
void add_agreement(VerdictAgreement& agreement, const std::string& verdict, const std::string& band);

nlohmann::ordered_json agreement_to_json(const VerdictAgreement& agreement);
// A plain-text confusion table (verdicts down, bands across) and what its corners mean.
std::string agreement_to_text(const VerdictAgreement& agreement);

// How many verdicts a model was trained and calibrated on (its provenance), as one line.
std::string verdicts_used_text(const Model& model);

}  // namespace residue
