#include "residue/training/audit.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "residue/training/groups.hpp"

namespace residue {

namespace {

template <typename T>
T median_of(std::vector<T> v) {
  if (v.empty()) return T{};
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(v.size() / 2), v.end());
  return v[v.size() / 2];
}

GroupSummary summarise(const std::string& name, const std::vector<const PreparedItem*>& items) {
  GroupSummary g;
  g.name = name;
  g.count = items.size();
  std::vector<int> quality, short_side, long_side;
  std::vector<double> aspect;
  double m64 = 0, exif = 0, make = 0, xmp = 0;
  for (const auto* it : items) {
    const FileFacts& f = it->facts;
    ++g.formats[f.format];
    if (f.jpeg_quality) quality.push_back(*f.jpeg_quality);
    short_side.push_back(std::min(f.width, f.height));
    long_side.push_back(std::max(f.width, f.height));
    aspect.push_back(static_cast<double>(long_side.back()) / std::max(1, short_side.back()));
    m64 += (f.width % 64 == 0 && f.height % 64 == 0) ? 1 : 0;
    exif += f.metadata.has_exif ? 1 : 0;
    make += (!f.metadata.camera_make.empty() || !f.metadata.camera_model.empty()) ? 1 : 0;
    xmp += f.metadata.has_xmp ? 1 : 0;
    g.declared_generated += declares_generated(f.metadata.digital_source_type) ? 1 : 0;
    g.generation_text += f.metadata.generation_text ? 1 : 0;
  }
  g.jpeg_count = quality.size();
  if (!quality.empty()) {
    g.jpeg_quality_min = *std::min_element(quality.begin(), quality.end());
    g.jpeg_quality_max = *std::max_element(quality.begin(), quality.end());
    g.jpeg_quality_median = median_of(quality);
  }
  if (!short_side.empty()) {
    g.short_side_min = *std::min_element(short_side.begin(), short_side.end());
    g.short_side_max = *std::max_element(short_side.begin(), short_side.end());
    g.short_side_median = median_of(short_side);
    g.long_side_median = median_of(long_side);
    g.aspect_median = median_of(aspect);
  }
  const double n = std::max<double>(1.0, static_cast<double>(items.size()));
  g.share_multiple_of_64 = m64 / n;
  g.share_exif = exif / n;
  g.share_camera_make = make / n;
  g.share_xmp = xmp / n;
  return g;
}

std::string percent(double share) {
  return std::to_string(static_cast<int>(std::lround(100 * share))) + " %";
}

double share_of(const GroupSummary& g, const std::string& format) {
  const auto it = g.formats.find(format);
  return g.count == 0 || it == g.formats.end()
             ? 0.0
             : static_cast<double>(it->second) / static_cast<double>(g.count);
}

void add_warnings(AuditReport& r) {
  const GroupSummary& c = r.camera;
  const GroupSummary& g = r.generated;
  auto warn = [&](std::string text) { r.warnings.push_back(std::move(text)); };
  if (g.count == 0) {
    // Camera photos alone (a camera-only model): nothing to compare the classes by.
    if (c.count < 100) {
      warn("Few camera photos: " + std::to_string(c.count) +
           ". A camera-only model's thresholds rest on them alone; a few hundred independent photos are "
           "the least for a 1 % promise.");
    }
    if (r.unreadable > 0)
      warn(std::to_string(r.unreadable) + " files could not be read or decoded and were left out.");
    return;
  }
  if (c.count < 20 || g.count < 20) {
    warn("Few examples: " + std::to_string(c.count) + " camera and " + std::to_string(g.count) +
         " generated images. Metrics from so few are noisy; collect at least a few hundred per class.");
  }
  if (c.count > 0 && g.count > 0) {
    const double ratio =
        static_cast<double>(std::max(c.count, g.count)) / static_cast<double>(std::min(c.count, g.count));
    if (ratio > 10) {
      warn("Classes are unbalanced " + std::to_string(static_cast<int>(ratio)) +
           ":1. Training reweights the classes, but the smaller one limits what can be learned.");
    }
  }
  std::map<std::string, bool> formats;
  for (const auto& [f, n] : c.formats) formats[f] = true;
  for (const auto& [f, n] : g.formats) formats[f] = true;
  std::string gaps;
  for (const auto& [f, unused] : formats) {
    const double sc = share_of(c, f);
    const double sg = share_of(g, f);
    if (std::fabs(sc - sg) >= 0.5) {
      gaps += (gaps.empty() ? "" : "; ") + f + " makes up " + percent(sc) + " of camera and " + percent(sg) +
              " of generated images";
    }
  }
  if (!gaps.empty()) {
    warn("Container confound: " + gaps +
         ". A detector can learn the file format and its compression instead of "
         "generator traces (Grommelt et al. 2024). Evaluate on copies recompressed to one JPEG quality, or "
         "collect "
         "both classes in the same format.");
  }
  if (c.jpeg_count > 0 && g.jpeg_count > 0 && std::abs(c.jpeg_quality_median - g.jpeg_quality_median) >= 10) {
    warn("JPEG quality differs: median " + std::to_string(c.jpeg_quality_median) + " for camera, " +
         std::to_string(g.jpeg_quality_median) +
         " for generated JPEGs. Compression strength shapes the noise "
         "residual; a detector may learn it.");
  }
  if (c.count > 0 && g.count > 0) {
    if (std::fabs(c.share_multiple_of_64 - g.share_multiple_of_64) >= 0.5) {
      warn("Size confound: " + percent(g.share_multiple_of_64) + " of generated images but " +
           percent(c.share_multiple_of_64) +
           " of camera images have both sides a multiple of 64. Size is not "
           "learned directly, but it often travels with resizing history that is.");
    }
    if (c.short_side_max < g.short_side_min || g.short_side_max < c.short_side_min) {
      warn("Sizes do not overlap: camera shorter sides " + std::to_string(c.short_side_min) + "-" +
           std::to_string(c.short_side_max) + " px, generated " + std::to_string(g.short_side_min) + "-" +
           std::to_string(g.short_side_max) +
           " px. Window counts and resampling traces then differ by class.");
    }
    if (std::fabs(c.share_exif - g.share_exif) >= 0.5) {
      warn("Metadata differs: " + percent(c.share_exif) + " of camera images and " + percent(g.share_exif) +
           " of generated images carry EXIF. Metadata is never learned, but such a gap usually means the "
           "classes "
           "went through different processing.");
    }
  }
  if (r.duplicate_pairs_across_classes > 0) {
    warn(std::to_string(r.duplicate_pairs_across_classes) +
         " pairs of (near) duplicate images carry different labels: check those labels.");
  }
  for (const auto& gen : r.generators) {
    if (gen.count < 5) {
      warn("Generator '" + gen.name + "' has only " + std::to_string(gen.count) +
           " images: its per-generator metrics are anecdotes, not measurements.");
    }
  }
  if (r.unreadable > 0) {
    warn(std::to_string(r.unreadable) + " files could not be read or decoded and were left out.");
  }
}

nlohmann::ordered_json summary_to_json(const GroupSummary& g) {
  nlohmann::ordered_json j = {{"count", g.count}, {"formats", g.formats}};
  j["jpeg"] = {{"count", g.jpeg_count},
               {"quality_min", g.jpeg_quality_min},
               {"quality_median", g.jpeg_quality_median},
               {"quality_max", g.jpeg_quality_max}};
  j["short_side"] = {{"min", g.short_side_min}, {"median", g.short_side_median}, {"max", g.short_side_max}};
  j["long_side_median"] = g.long_side_median;
  j["aspect_median"] = g.aspect_median;
  j["share_sides_multiple_of_64"] = g.share_multiple_of_64;
  j["share_exif"] = g.share_exif;
  j["share_camera_make_model"] = g.share_camera_make;
  j["share_xmp"] = g.share_xmp;
  j["declared_generated"] = g.declared_generated;
  j["generation_settings_text"] = g.generation_text;
  return j;
}

}  // namespace

AuditReport audit_dataset(const std::vector<PreparedItem>& items, size_t unreadable) {
  AuditReport r;
  r.unreadable = unreadable;
  std::vector<const PreparedItem*> camera, generated;
  std::map<std::string, std::vector<const PreparedItem*>> by_generator;
  for (const auto& it : items) {
    if (it.file.label == Label::kCamera) {
      camera.push_back(&it);
    } else {
      generated.push_back(&it);
      by_generator[it.file.generator].push_back(&it);
    }
  }
  r.camera = summarise("camera", camera);
  r.generated = summarise("generated", generated);
  for (const auto& [name, list] : by_generator) r.generators.push_back(summarise(name, list));
  for (const auto& [i, j] : duplicate_pairs(items)) {
    (items[i].file.label == items[j].file.label ? r.duplicate_pairs_within_class
                                                : r.duplicate_pairs_across_classes) += 1;
  }
  add_warnings(r);
  return r;
}

nlohmann::ordered_json audit_to_json(const AuditReport& r) {
  nlohmann::ordered_json j;
  j["camera"] = summary_to_json(r.camera);
  j["generated"] = summary_to_json(r.generated);
  j["generators"] = nlohmann::ordered_json::object();
  for (const auto& g : r.generators) j["generators"][g.name] = summary_to_json(g);
  j["duplicates"] = {{"pairs_within_class", r.duplicate_pairs_within_class},
                     {"pairs_across_classes", r.duplicate_pairs_across_classes}};
  j["unreadable"] = r.unreadable;
  j["warnings"] = r.warnings;
  return j;
}

std::string audit_to_text(const AuditReport& r) {
  std::string out;
  char line[320];
  std::snprintf(line, sizeof line, "%-24s %6s  %-26s %-11s %-15s %5s %5s %5s\n", "group", "images", "formats",
                "JPEG q med", "short side", "x64", "EXIF", "XMP");
  out += line;
  auto row = [&](const GroupSummary& g) {
    std::string formats;
    for (const auto& [f, n] : g.formats) formats += f + ":" + std::to_string(n) + " ";
    const std::string q = g.jpeg_count > 0 ? std::to_string(g.jpeg_quality_median) : "-";
    const std::string side = std::to_string(g.short_side_min) + "-" + std::to_string(g.short_side_max);
    std::snprintf(line, sizeof line, "%-24.24s %6zu  %-26.26s %-11s %-15s %5s %5s %5s\n", g.name.c_str(),
                  g.count, formats.c_str(), q.c_str(), side.c_str(), percent(g.share_multiple_of_64).c_str(),
                  percent(g.share_exif).c_str(), percent(g.share_xmp).c_str());
    out += line;
  };
  row(r.camera);
  row(r.generated);
  for (const auto& g : r.generators) row(g);
  out += "duplicates: " + std::to_string(r.duplicate_pairs_within_class) + " pairs within a class, " +
         std::to_string(r.duplicate_pairs_across_classes) + " across classes\n";
  if (r.warnings.empty()) {
    out += "no warnings\n";
  } else {
    out += std::to_string(r.warnings.size()) + " warning(s):\n";
    for (const auto& w : r.warnings) out += "  ! " + w + "\n";
  }
  return out;
}

}  // namespace residue
