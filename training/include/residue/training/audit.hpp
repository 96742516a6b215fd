// Dataset audit: what differs between the classes besides generator traces. Per class and per
// generator: counts, containers, JPEG qualities, sizes, aspect ratios, metadata, duplicates; and
// plain-word warnings where a confound could be learned instead of the traces (Grommelt et al.
// 2024, "Fake or JPEG? Revealing common biases in generated image detection datasets").
#pragma once

#include <map>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "residue/training/prepare.hpp"

namespace residue {

struct GroupSummary {
  std::string name;  // "camera", "generated" or a generator
  size_t count = 0;
  std::map<std::string, size_t> formats;
  size_t jpeg_count = 0;
  int jpeg_quality_min = 0, jpeg_quality_median = 0, jpeg_quality_max = 0;
  int short_side_min = 0, short_side_median = 0, short_side_max = 0;
  int long_side_median = 0;
  double aspect_median = 1.0;       // long side / short side
  double share_multiple_of_64 = 0;  // both sides multiples of 64
  double share_exif = 0;            // any EXIF
  double share_camera_make = 0;     // EXIF make or model present
  double share_xmp = 0;
  size_t declared_generated = 0;  // IPTC digital source type says algorithmic / AI
  size_t generation_text = 0;     // PNG text with generation settings
};

struct AuditReport {
  GroupSummary camera;
  GroupSummary generated;
  std::vector<GroupSummary> generators;
  size_t duplicate_pairs_within_class = 0;
  size_t duplicate_pairs_across_classes = 0;
  size_t unreadable = 0;
  std::vector<std::string> warnings;
};

AuditReport audit_dataset(const std::vector<PreparedItem>& items, size_t unreadable);

nlohmann::ordered_json audit_to_json(const AuditReport& report);
std::string audit_to_text(const AuditReport& report);

}  // namespace residue
