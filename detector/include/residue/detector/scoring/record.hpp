// JSON records for the command line and (later) the service: one object per input.
#pragma once

#include <nlohmann/json.hpp>
#include <string>

#include "residue/features/extract.hpp"
#include "residue/training/record_paths.hpp"

namespace residue {

// The notice every human-facing output carries (../shared/BRIEF.md, "Advisory").
inline constexpr const char* kAdvisoryNotice =
    "Advisory: a residue score is statistical evidence from pixel traces, calibrated on the "
    "training data the user supplied. Recompression, resizing, screenshots, heavy editing and "
    "generators absent from that data degrade it. It must never be the sole basis for action "
    "against a person: follow your organisation's review policy and applicable law.";

// Exit codes of the command line (README.md, "Exit codes").
// kCheckFailed: `compare` found NEW worse than OLD; `drift` found that retraining looks due.
enum class ExitCode : int { kOk = 0, kFailure = 1, kUsage = 2, kSomeInputsFailed = 3, kCheckFailed = 4 };

// Paths in records. A file name is bytes, not text, and archives hold names that are not valid UTF-8
// (old code pages, ZIP extracts); JSON, CSV and HTML need valid UTF-8. So "path" is always valid
// UTF-8: the name itself when it is valid UTF-8, otherwise the name with every byte that is not part
// of a valid UTF-8 sequence replaced by U+FFFD (for people to read). Only then, "path_bytes" follows
// it with the exact bytes, percent-encoded as in RFC 3986 (every byte other than A-Z a-z 0-9 - . _ ~ /
// as %XX), so that no path is lost or confused with another (docs/reliability.md, "File names").
void set_path(nlohmann::ordered_json& record, const std::string& path);
// path_of, percent_encode and percent_decode: residue/training/record_paths.hpp.
// `text` with every byte that is not part of a valid UTF-8 sequence replaced by U+FFFD.
std::string valid_utf8(const std::string& text);
bool is_valid_utf8(const std::string& text);

// One JSON line of a record. Strings other than the path (an error message quoting a file name, a
// declared camera model) may hold invalid UTF-8 too: those bytes are written as U+FFFD, never thrown.
std::string record_line(const nlohmann::ordered_json& record);

// {"path", ["path_bytes",] "error": {"code", "message"}}
nlohmann::ordered_json error_record(const std::string& path, const Error& error);

// The record of `residue features`: image facts, windows, named values, compression history,
// per-family timings.
nlohmann::ordered_json features_record(const std::string& path, const Extraction& extraction);

}  // namespace residue
