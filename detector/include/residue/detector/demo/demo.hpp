// The built-in demonstration: a community photo contest screens its entries. Open photographs
// from a Debian package (scikit-image's samples) stand for the members' camera pictures; the
// "generated" entries are SIMULATED here by two upsampling decoders (sample_images.hpp). The demo
// builds a labelled training set, trains, scans an entries folder holding one broken file, writes
// the HTML report and the explain pictures for the highest-scoring entry.
#pragma once

#include <filesystem>
#include <ostream>

#include "residue/features/status.hpp"

namespace residue {

struct DemoPaths {
  std::filesystem::path model, scan, report, explain_dir, truth;
};

Result<DemoPaths> run_contest_demo(const std::filesystem::path& photo_dir,
                                   const std::filesystem::path& out_dir, int jobs, std::ostream& log);

}  // namespace residue
