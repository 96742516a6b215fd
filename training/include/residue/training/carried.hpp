// Feature vectors carried in records (`scan --with-features`, `worker --with-features`, the
// verdict store) and read back for training, so that images can be learned from after the files
// are gone, and extraction can be spread over many machines.
//
// A record's "features" member:
//   {"extractor": kExtractorVersion, "schema": feature_schema_id(), "encoding": "float64-le-base64",
//    "facts": {...file facts...}, "vector": "<base64>",
//    "copies": {"level": "none|light|full", "made": [{"transform", "facts", "vector"}], "failed": [...]}}
// Vectors are IEEE 754 doubles, little-endian, base64 (RFC 4648): exact, so a model trained from
// records is the model trained from the files, bit for bit. Window vectors are not carried.
#pragma once

#include <filesystem>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "residue/training/augment.hpp"
#include "residue/training/dataset.hpp"
#include "residue/training/prepare.hpp"

namespace residue {

inline constexpr const char* kVectorEncoding = "float64-le-base64";

std::string encode_vector(const std::vector<double>& values);
// Empty on malformed base64 or a length that is not a whole number of doubles.
std::optional<std::vector<double>> decode_vector(const std::string& text);

// The "features" member for an image (and its copies, made at `copies_level`).
nlohmann::ordered_json carried_to_json(const PreparedItem& item, const PreparedCopies* copies = nullptr,
                                       Augment copies_level = Augment::kNone);

struct CarriedFeatures {
  PreparedItem item;  // facts and features (file and sha256 left to the caller)
  Augment copies_level = Augment::kNone;
  PreparedCopies copies;
};

// Reads a "features" member back. Refused (kUnsupported) when it was made by another extractor
// version or feature schema, naming both; kCorrupt when it is malformed.
Result<CarriedFeatures> carried_from_json(const nlohmann::json& json);

// Training from records (JSON lines, as scan, worker and collect write them).
struct RecordsForTraining {
  std::vector<PreparedItem> items;   // in the order of the labels, else sorted by path
  std::vector<PreparedItem> copies;  // at the asked level, `source` set
  std::vector<std::pair<std::string, std::string>> skipped;  // (path, reason)
  size_t records = 0;                                        // lines read
  size_t unlabelled = 0;  // records with features but neither a label of their own nor one in `labels`
  size_t missing = 0;     // labelled files without a usable record
  Augment augment = Augment::kNone;  // the copies level used
};

// Labels come from `labels` (a dataset as `train` reads one; matched by path) when given, else
// from each record's own "label", "generator" and "group" members. Records without "features",
// and error records, are skipped with their reason; a vector from another extractor or schema
// refuses the whole set (kUnsupported). `augment` copies must have been carried at that level or
// higher (kUnsupported otherwise); with `at_most`, the level is lowered to what every record carries.
Result<RecordsForTraining> load_records_for_training(const std::vector<std::filesystem::path>& files,
                                                     const Dataset* labels, Augment augment,
                                                     bool at_most = false);

// Whether `path` holds JSON lines (its first non-blank character is '{'), not a manifest or folder.
bool is_records_file(const std::filesystem::path& path);

}  // namespace residue
