// How a model holds up under everyday processing (`residue evaluate --processing`): every
// labelled image is processed by each transform (transforms.hpp), extracted and scored with its
// processing evidence, exactly as `scan` would; per transform, the share of camera photos put in
// likely-generated (the false positives a reviewer would act on), the share made inconclusive,
// the share of generated images still caught, the shares of each class in likely-camera (for
// generated images: fakes waved through), and the ROC AUC of the probabilities.
#pragma once

#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "residue/training/dataset.hpp"
#include "residue/training/model.hpp"
#include "residue/training/prepare.hpp"

namespace residue {

struct ProcessingRow {
  std::string transform;
  std::string description;
  size_t camera = 0;
  size_t generated = 0;
  size_t failed = 0;                 // files the transform or the extraction refused
  double camera_flagged = 0.0;       // camera photos in likely-generated
  double camera_inconclusive = 0.0;  // camera photos in inconclusive (any reason)
  double camera_guarded = 0.0;       // ... because of the applicability check or processing
  double generated_caught = 0.0;     // generated images in likely-generated
  double generated_inconclusive = 0.0;
  double generated_guarded = 0.0;
  double camera_passed = 0.0;     // camera photos in likely-camera
  double generated_passed = 0.0;  // generated images in likely-camera: fakes waved through
  double roc_auc = 0.0;           // of p_generated, whatever the band
};

std::vector<ProcessingRow> evaluate_processing(const Dataset& dataset, const Model& model,
                                               const std::vector<std::string>& transforms,
                                               const ExtractOptions& options, int jobs,
                                               std::optional<double> prior = std::nullopt,
                                               const ProgressFn& progress = {});

nlohmann::ordered_json processing_rows_to_json(const std::vector<ProcessingRow>& rows);
std::string processing_rows_to_text(const std::vector<ProcessingRow>& rows);

}  // namespace residue
