// Calibration of a trained model on labelled images it never trained on (conformal.hpp): each
// image is scored as a scan would score it, guards included, and the thresholds and camera tail
// are set from those scores.
#pragma once

#include <string>
#include <vector>

#include "residue/training/conformal.hpp"
#include "residue/training/groups.hpp"
#include "residue/training/model.hpp"

namespace residue {

// Calibration images from prepared items (and their augmented copies, which share their
// original's group): p and margin from `model`, guarded when the model's applicability check
// (with the file's processing evidence) makes the image inconclusive whatever its score.
std::vector<CalibrationImage> score_for_calibration(const Model& model,
                                                    const std::vector<PreparedItem>& items,
                                                    const std::vector<PreparedItem>& copies,
                                                    GroupBy group_by);

// The fewest calibration camera images `calibrate` accepts: below it a threshold would rest on
// almost nothing (the tail would still be meaningful, but a model's own out-of-fold tail is then
// the better one).
inline constexpr size_t kMinCalibrationCamera = 20;

// Where calibration images came from, for the model's record.
struct CalibrationSource {
  std::vector<std::string> roots;
  size_t unreadable = 0;  // files of the roots that could not be read (left out)
};

// Scores and calibrates: fails (kTooSmall) with fewer than kMinCalibrationCamera camera images,
// saying how many there were. On success the model carries the new thresholds, promise, record
// (with the source and the time) and tail, and a new id.
Result<Calibrated> calibrate_model(Model& model, const std::vector<PreparedItem>& items,
                                   const std::vector<PreparedItem>& copies, GroupBy group_by,
                                   const CalibrationSettings& settings, const CalibrationSource& source);

}  // namespace residue
