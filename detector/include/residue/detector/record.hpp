// JSON records for the command line and (later) the service: one object per input.
#pragma once

#include <nlohmann/json.hpp>
#include <string>

#include "residue/features/extract.hpp"

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

// {"path", "error": {"code", "message"}}
nlohmann::ordered_json error_record(const std::string& path, const Error& error);

// The record of `residue features`: image facts, windows, named values, compression history,
// per-family timings.
nlohmann::ordered_json features_record(const std::string& path, const Extraction& extraction);

}  // namespace residue
