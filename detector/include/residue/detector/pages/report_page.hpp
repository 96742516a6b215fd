// The batch report: one self-contained HTML page (no network, no external assets) from the
// records of one or more scans (shards concatenate).
#pragma once

#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "residue/training/model.hpp"
#include "residue/training/verdicts.hpp"

namespace residue {

struct ReportInput {
  std::vector<nlohmann::json> records;  // as read from the scan outputs
  size_t unreadable_lines = 0;          // lines that were not JSON records
  std::vector<std::string> sources;     // the scan files
  std::optional<Model> model;           // for the provenance section, when given
  int top = 24;                         // highest-scoring files shown with pictures
  // Reviewers' verdicts on images of these records (matched by SHA-256): the records' bands against
  // them, and where they came from.
  std::optional<VerdictAgreement> verdicts;
  std::string verdicts_source;
};

// Builds the page. Pictures of the top files are made by reading the files again where they are
// still readable; otherwise the page says so.
std::string report_page(const ReportInput& input);

}  // namespace residue
