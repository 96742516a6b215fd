#include "residue/training/calibrate.hpp"

#include "residue/training/trainer.hpp"

namespace residue {

std::vector<CalibrationImage> score_for_calibration(const Model& model,
                                                    const std::vector<PreparedItem>& items,
                                                    const std::vector<PreparedItem>& copies,
                                                    GroupBy group_by) {
  const std::vector<int> groups = assign_groups(items, group_by);
  std::vector<CalibrationImage> images;
  images.reserve(items.size() + copies.size());
  auto add = [&](const PreparedItem& item, int group, bool copy) {
    const Score s = score(model, item.features, std::nullopt, &item.facts.processing);
    CalibrationImage im;
    im.p = s.p_generated;
    im.margin = s.margin;
    im.label = item.file.label == Label::kGenerated ? 1 : 0;
    im.group = group;
    // The reasons of the applicability check are the guards; "between the thresholds" is not one.
    im.guarded = s.domain && !s.domain->reasons.empty();
    im.copy = copy;
    if (copy) im.copy_kind = transform_kind(item.augmentation);
    im.sha256 = item.sha256;
    im.path = item.file.path;
    images.push_back(std::move(im));
  };
  for (size_t i = 0; i < items.size(); ++i) add(items[i], groups[i], false);
  for (const auto& c : copies) add(c, groups[c.source], true);
  return images;
}

Result<Calibrated> calibrate_model(Model& model, const std::vector<PreparedItem>& items,
                                   const std::vector<PreparedItem>& copies, GroupBy group_by,
                                   const CalibrationSettings& settings, const CalibrationSource& source) {
  size_t camera = 0;
  for (const auto& it : items) camera += it.file.label == Label::kCamera ? 1 : 0;
  if (camera < kMinCalibrationCamera) {
    return make_error(
        ErrorCode::kTooSmall,
        "calibration needs at least " + std::to_string(kMinCalibrationCamera) +
            " camera photos the model never trained on; " + std::to_string(camera) +
            " could be read. Add camera photos (ROOT/camera/**), ideally hundreds of independent ones");
  }
  Calibrated c =
      calibrate_thresholds(score_for_calibration(model, items, copies, group_by), settings, "held-out");
  c.record.roots = source.roots;
  c.record.unreadable = source.unreadable;
  c.record.created = utc_now();
  apply_calibration(model, c, settings.target_fpr, settings.generated_miss);
  model.provenance["settings"]["target_fpr"] = settings.target_fpr;
  model.provenance["settings"]["generated_miss"] = settings.generated_miss;
  model.provenance["settings"]["fpr_confidence"] = settings.confidence;
  stamp_model_id(model);
  return c;
}

}  // namespace residue
