// Paths in JSON records (scan, worker and service records; records read back for training). A
// record's "path" is always valid UTF-8; a name that is not carries its exact bytes in
// "path_bytes", percent-encoded as in RFC 3986 (every byte other than A-Z a-z 0-9 - . _ ~ / as %XX).
// Records are written by detector/scoring/record.hpp (set_path).
#pragma once

#include <nlohmann/json.hpp>
#include <string>

namespace residue {

// The exact path bytes of a record (its "path_bytes" when present, else "path"); empty when the
// record has neither.
std::string path_of(const nlohmann::json& record);
std::string path_of(const nlohmann::ordered_json& record);

std::string percent_encode(const std::string& bytes);
// Invalid escapes ("%G1", a "%" near the end) are kept as they are.
std::string percent_decode(const std::string& text);

}  // namespace residue
