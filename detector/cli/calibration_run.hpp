// Shared by `calibrate` and `train --calibration`: read the calibration roots (through the feature
// cache), leave out images the model trained on, calibrate, and say what the data can promise.
#pragma once

#include <string>
#include <vector>

#include "dataset_options.hpp"
#include "residue/training/calibrate.hpp"

namespace residue::cli {

// Processed copies of held-out calibration images are not made by default (docs/training.md,
// "Calibration", says why and what they cost).
inline constexpr Augment kCalibrationAugment = Augment::kFull;

struct CalibrationInputs {
  std::vector<std::string> roots;  // labelled folders (ROOT/camera/**, ROOT/generated/<g>/**) or manifests
  DatasetArgs data;                // cache, jobs, extraction limits; `root` is set per root
  GroupBy group_by = GroupBy::kDuplicates;
  CalibrationSettings settings;
  std::string verdicts;  // verdict store whose judged images join the calibration images
};

// Calibrates `model` in place and prints what changed. Returns false after printing the error.
bool calibrate_from_roots(Model& model, const CalibrationInputs& inputs, const char* command);

// "Calibration: ..." lines for a model (train and calibrate print them; compare shows them too).
std::string calibration_summary(const Model& model);

}  // namespace residue::cli
