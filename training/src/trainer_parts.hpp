// What trainer.cpp (the two-class SVM), camera_training.cpp (the camera model) and
// training_settings.cpp (settings, lineage, provenance lists) share. Internal to the training
// library.
#pragma once

#include <string>
#include <vector>

#include "residue/training/trainer.hpp"

namespace residue::detail {

// The training instances: the images, then their augmented copies.
using Instances = std::vector<const PreparedItem*>;

// 1 for a generated image, 0 for a camera photo.
int label_of(const PreparedItem& item);

// Names of GroupBy's values, in its order, as settings and provenance write them.
extern const char* const kGroupNames[3];

// Provenance's "training_files": each image's training_file_key, sorted.
std::vector<std::string> training_file_keys(const std::vector<PreparedItem>& items);

// The out-of-fold scores of every instance as calibration images (copies after the n images).
std::vector<CalibrationImage> out_of_fold_calibration(const Instances& instances,
                                                      const std::vector<double>& p,
                                                      const std::vector<double>& margins,
                                                      const std::vector<int>& labels,
                                                      const std::vector<int>& groups, size_t n);

// The grouped folds of the images (cv.groups, cv.fold) and of every instance, the copies in their
// image's fold and group.
struct FoldPlan {
  int k = 2;
  std::vector<int> fold_all;    // per instance: the images, then their copies
  std::vector<int> groups_all;  // the same for groups
};
Result<FoldPlan> plan_folds(const std::vector<PreparedItem>& items, const std::vector<PreparedItem>& copies,
                            const std::vector<int>& labels, const TrainSettings& settings,
                            CrossValidation& cv);

// --- camera_training.cpp ---

// The camera-only density on the model's features (camera_model.hpp), fitted without a generated
// image: sets model.camera_only (the density on every camera instance, the tail of the camera
// photos' out-of-fold scores) and returns every instance's out-of-fold camera-only score.
std::vector<double> fit_camera_only(Model& model, const Instances& instances,
                                    const std::vector<int>& labels_all, const std::vector<int>& fold_all,
                                    const std::vector<int>& groups_all, int k, size_t n,
                                    const TrainSettings& settings);

// What the camera-only score did out of fold, alone and beside the two-class score
// (provenance "camera_only"; docs/quality.md).
nlohmann::ordered_json camera_only_provenance(const Model& model, const std::vector<double>& oof_all,
                                              const CrossValidation& cv, const std::vector<int>& labels,
                                              const std::vector<std::string>& generators);

// Training on camera photos alone (settings.camera_only; docs/training.md, "The camera model").
Result<TrainOutcome> train_camera_only(const std::vector<PreparedItem>& items,
                                       const std::vector<PreparedItem>& copies,
                                       const std::vector<size_t>& columns, const CameraPixelModel& pixels,
                                       const TrainSettings& settings, const AuditReport& audit);

}  // namespace residue::detail
