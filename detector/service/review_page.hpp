// The review page `residue serve` answers at GET /: one self-contained HTML page (no external
// resources) on which a reviewer chooses or drops images and sees each one's score, band,
// threshold, contributions, declared provenance, reasons and explanation pictures, from
// POST /v1/explain, with the advisory notice always in view.
#pragma once

#include <string>

namespace residue {

// The page, with the advisory notice filled in.
const std::string& review_page();

}  // namespace residue
