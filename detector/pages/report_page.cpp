#include "residue/detector/pages/report_page.hpp"

#include <algorithm>
#include <cstdio>
#include <filesystem>
#include <map>

#include "residue/detector/pages/evaluation_page.hpp"
#include "residue/detector/scoring/pictures.hpp"
#include "residue/detector/scoring/record.hpp"
#include "residue/features/decode.hpp"
#include "residue/features/families.hpp"

namespace residue {

namespace {

const char* const kBands[] = {"likely-generated", "inconclusive", "likely-camera"};
const char* const kBandColour[] = {"#c0392b", "#d4a017", "#1f5fa8"};

std::string fmt(const char* f, double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, f, v);
  return buf;
}

bool scored(const nlohmann::json& r) { return !r.contains("error") && r.contains("p_generated"); }

std::string histogram_svg(const std::vector<nlohmann::json>& records) {
  // 20 bins of P(generated), each bar coloured by the band most of its files fall in.
  int counts[20] = {};
  std::map<int, std::map<std::string, int>> band_of_bin;
  for (const auto& r : records) {
    if (!scored(r)) continue;
    const int b = std::clamp(static_cast<int>(r["p_generated"].get<double>() * 20), 0, 19);
    ++counts[b];
    ++band_of_bin[b][r["band"].get<std::string>()];
  }
  const int peak = std::max(1, *std::max_element(counts, counts + 20));
  std::string s =
      "<svg xmlns='http://www.w3.org/2000/svg' width='640' height='240' font-family='sans-serif' "
      "font-size='11' role='img' aria-label='Score histogram'>";
  for (int b = 0; b < 20; ++b) {
    const double h = 180.0 * counts[b] / peak;
    std::string colour = "#999";
    int best = 0;
    for (int k = 0; k < 3; ++k) {
      const int n = band_of_bin[b][kBands[k]];
      if (n > best) {
        best = n;
        colour = kBandColour[k];
      }
    }
    s += "<rect x='" + std::to_string(40 + b * 29) + "' y='" + fmt("%.1f", 200 - h) +
         "' width='27' height='" + fmt("%.1f", h) + "' fill='" + colour + "'><title>" +
         std::to_string(counts[b]) + " files with P in [" + fmt("%.2f", b / 20.0) + ", " +
         fmt("%.2f", (b + 1) / 20.0) + ")</title></rect>";
    if (counts[b] > 0) {
      s += "<text x='" + std::to_string(53 + b * 29) + "' y='" + fmt("%.1f", 196 - h) +
           "' text-anchor='middle'>" + std::to_string(counts[b]) + "</text>";
    }
  }
  s += "<line x1='38' y1='200' x2='622' y2='200' stroke='#444'/>";
  for (int k = 0; k <= 4; ++k) {
    s += "<text x='" + std::to_string(40 + k * 145) + "' y='215' text-anchor='middle'>" +
         fmt("%.2f", k / 4.0) + "</text>";
  }
  return s + "<text x='330' y='234' text-anchor='middle'>P(generated)</text></svg>";
}

// Thumbnail and residual-spectrum pictures of one file, or a note when it cannot be read now.
std::string pictures_of(const std::string& path) {
  auto bytes = read_file(path);
  if (!bytes) return "<td colspan='2'>not readable now: " + html_escape(bytes.error().message) + "</td>";
  std::string cells;
  // Small images whole (a 1/8-scale JPEG preview of a 256 px image would be 32 px); large ones by
  // libjpeg's fast DCT scaling.
  const auto header = read_header(*bytes);
  const bool small = header && static_cast<long>(header->width) * header->height <= 4'000'000;
  auto preview = small ? decode_image(*bytes) : decode_preview(*bytes);
  cells += preview ? "<td><img alt='thumbnail' src='" + png_data_uri(thumbnail(*preview, 160)) + "'></td>"
                   : "<td>–</td>";
  auto windows = decode_windows(*bytes);
  if (windows && !windows->tiles.empty()) {
    const Tile& t = windows->tiles[windows->tiles.size() / 2];
    const auto residual = denoise_residual(t.luma().data(), t.size);
    cells += "<td><img alt='residual spectrum' width='128' height='128' src='" +
             png_data_uri(thumbnail(spectrum_picture(residual, t.size, true), 128)) + "'></td>";
  } else {
    cells += "<td>–</td>";
  }
  return cells;
}

std::string folder_of(const std::string& path) {
  const auto parent = std::filesystem::path(path).parent_path().string();
  return parent.empty() ? "." : parent;
}

}  // namespace

namespace {

// The reason kind: a record's reason up to its first parenthesis or colon.
std::string reason_kind(const std::string& reason) {
  const size_t cut = std::min(reason.find(" ("), reason.find(':'));
  return reason.substr(0, cut);
}

// Why records are inconclusive: counts per reason kind and the first records with their reasons
// and processing notes, so a reviewer sees what the tool could not judge and why.
std::string why_inconclusive(const std::vector<nlohmann::json>& records) {
  std::map<std::string, size_t> kinds;
  std::vector<const nlohmann::json*> shown;
  for (const auto& r : records) {
    if (r.contains("error") || r.value("band", "") != "inconclusive") continue;
    if (shown.size() < 50) shown.push_back(&r);
    for (const auto& reason : r.value("reasons", nlohmann::json::array())) {
      ++kinds[reason_kind(reason.get<std::string>())];
    }
  }
  std::string h = "<h2>Why inconclusive</h2>";
  if (shown.empty()) return h + "<p>No record is inconclusive.</p>";
  h +=
      "<p>The tool abstains rather than guess when an image lies outside what its training data showed, when "
      "it carries processing the training photos never showed, when the file is damaged (its decoder "
      "reported corrupt data and decoded past it), when too little fine detail is left to judge (the traces "
      "were weakened: blurred, denoised or heavily recompressed, perhaps on purpose), or when its score "
      "falls "
      "between the two thresholds. The probability is still given, but it is not a judgement.</p><table><tr>"
      "<th>reason</th>"
      "<th>records</th></tr>";
  for (const auto& [kind, n] : kinds) {
    h += "<tr><td>" + html_escape(kind) + "</td><td class='n'>" + std::to_string(n) + "</td></tr>";
  }
  h += "</table><table><tr><th>file</th><th>P(generated)</th><th>reasons</th><th>processing found</th></tr>";
  for (const auto* r : shown) {
    std::string reasons, notes;
    for (const auto& x : r->value("reasons", nlohmann::json::array()))
      reasons += html_escape(x.get<std::string>()) + "<br>";
    if (r->contains("processing") && (*r)["processing"].is_object()) {
      for (const auto& x : (*r)["processing"].value("notes", nlohmann::json::array())) {
        notes += html_escape(x.get<std::string>()) + "<br>";
      }
    }
    h += "<tr><td><code>" + html_escape((*r)["path"].get<std::string>()) + "</code></td><td class='n'>" +
         fmt("%.3f", r->value("p_generated", 0.0)) + "</td><td>" + (reasons.empty() ? "–" : reasons) +
         "</td><td>" + (notes.empty() ? "–" : notes) + "</td></tr>";
  }
  return h + "</table>";
}

// The records whose scores are rarest among calibration camera photos first (smallest camera tail
// p-value; ties by P(generated)): the order a review queue should take, whether or not the
// model's threshold can promise anything.
std::string review_first(const std::vector<const nlohmann::json*>& scored_records, int top) {
  std::vector<const nlohmann::json*> tailed;
  for (const auto* r : scored_records) {
    if (r->contains("camera_tail") && (*r)["camera_tail"].is_object()) tailed.push_back(r);
  }
  std::string h = "<h2>Review first: rarest among camera photos</h2>";
  if (tailed.empty()) {
    return h +
           "<p>No record carries a camera tail (the model records no calibration camera scores: retrain, or "
           "run <code>residue calibrate</code>).</p>";
  }
  std::stable_sort(tailed.begin(), tailed.end(), [](const nlohmann::json* a, const nlohmann::json* b) {
    const double pa = (*a)["camera_tail"]["p_value"].get<double>();
    const double pb = (*b)["camera_tail"]["p_value"].get<double>();
    return pa != pb ? pa < pb : (*a)["p_generated"].get<double>() > (*b)["p_generated"].get<double>();
  });
  const auto& first = (*tailed.front())["camera_tail"];
  h += "<p>How many of the model's " +
       html_escape(first.value("source", std::string("calibration camera photos"))) + " (" +
       std::to_string(first["camera_photos"].get<size_t>()) +
       ") scored at least as high as each file, rarest first. A file that few camera photos match is worth a "
       "look first; this order holds even where no threshold can be promised. It is not a finding about the "
       "file.</p><table><tr><th>#</th><th>file</th><th>camera photos as high</th><th>their groups</th>"
       "<th>p-value</th><th>share of camera photos, at most (95 "
       "%)</th><th>P(generated)</th><th>band</th></tr>";
  for (size_t i = 0; i < tailed.size() && i < static_cast<size_t>(std::max(0, top)); ++i) {
    const auto& r = *tailed[i];
    const auto& t = r["camera_tail"];
    h += "<tr><td class='n'>" + std::to_string(i + 1) + "</td><td><code>" + html_escape(r["path"]) +
         "</code></td><td class='n'>" + std::to_string(t["camera_photos_at_least"].get<size_t>()) + " of " +
         std::to_string(t["camera_photos"].get<size_t>()) + "</td><td class='n'>" +
         std::to_string(t["groups_at_least"].get<size_t>()) + " of " +
         std::to_string(t["groups"].get<size_t>()) + "</td><td class='n'>" +
         fmt("%.4f", t["p_value"].get<double>()) + "</td><td class='n'>" +
         fmt("%.1f %%", 100 * t["upper_bound"].get<double>()) + "</td><td class='n'>" +
         fmt("%.3f", r["p_generated"].get<double>()) + "</td><td>" + html_escape(r["band"]) + "</td></tr>";
  }
  return h + "</table>";
}

}  // namespace

std::string report_page(const ReportInput& in) {
  std::map<std::string, size_t> band_counts;
  std::map<std::string, std::vector<std::string>> errors;  // code -> paths
  struct FolderRow {
    size_t files = 0, errors = 0;
    std::map<std::string, size_t> bands;
    double p_sum = 0;
  };
  std::map<std::string, FolderRow> folders;
  std::vector<const nlohmann::json*> ranked;
  std::vector<const nlohmann::json*> disagreements;
  std::map<std::string, size_t> models;
  for (const auto& r : in.records) {
    FolderRow& f = folders[folder_of(r.value("path", std::string("?")))];
    ++f.files;
    if (r.contains("model") && r["model"].is_string()) ++models[r["model"].get<std::string>()];
    if (!scored(r)) {
      ++f.errors;
      const std::string code =
          r.contains("error") ? r["error"].value("code", std::string("unknown")) : "unknown";
      errors[code].push_back(r.value("path", std::string("?")));
      continue;
    }
    const std::string band = r["band"];
    ++band_counts[band];
    ++f.bands[band];
    f.p_sum += r["p_generated"].get<double>();
    ranked.push_back(&r);
    if (r.contains("declared") && r["declared"].is_object()) {
      const auto& d = r["declared"];
      const bool says_generated = d.value("declares_generated", false);
      const bool says_camera = d.value("digital_source_type", nlohmann::json()).is_string()
                                   ? d["digital_source_type"] == "digitalCapture"
                                   : d["camera_make"].is_string();
      if ((says_generated && band == "likely-camera") ||
          (says_camera && !says_generated && band == "likely-generated")) {
        disagreements.push_back(&r);
      }
    }
  }
  std::stable_sort(ranked.begin(), ranked.end(), [](const nlohmann::json* a, const nlohmann::json* b) {
    return (*a)["p_generated"].get<double>() > (*b)["p_generated"].get<double>();
  });

  std::string h =
      "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>residue report</title><style>"
      "body{font-family:sans-serif;max-width:1100px;margin:2em auto;color:#222;padding:0 1em}"
      ".advisory{border-left:5px solid #c0392b;background:#fbeeee;padding:.6em 1em}"
      "table{border-collapse:collapse;margin:1em 0}td,th{border:1px solid #ccc;padding:.3em .6em;"
      "vertical-align:middle}th{background:#f4f4f4;text-align:left}td.n{text-align:right}"
      ".cards{display:flex;gap:1em;flex-wrap:wrap}.card{border-radius:6px;padding:.8em 1.2em;color:#fff;"
      "min-width:11em}.card b{font-size:2em;display:block}code{font-size:.9em;word-break:break-all}"
      "@media print{img{max-width:120px}}</style></head><body><h1>residue report</h1>";
  h += "<p class='advisory'>" + html_escape(kAdvisoryNotice) + "</p>";
  h += "<p>" + std::to_string(in.records.size()) + " records from ";
  for (size_t i = 0; i < in.sources.size(); ++i)
    h += (i ? ", " : "") + std::string("<code>") + html_escape(in.sources[i]) + "</code>";
  h += "; model";
  h += models.size() == 1 ? " " : "s ";
  for (const auto& [id, n] : models) h += "<code>" + html_escape(id) + "</code> ";
  if (in.unreadable_lines > 0)
    h += "; " + std::to_string(in.unreadable_lines) + " lines were not records and were left out";
  h += ".</p><h2>Bands</h2><div class='cards'>";
  for (int k = 0; k < 3; ++k) {
    h += "<div class='card' style='background:" + std::string(kBandColour[k]) + "'><b>" +
         std::to_string(band_counts[kBands[k]]) + "</b>" + kBands[k] + "</div>";
  }
  size_t n_errors = 0;
  for (const auto& [code, paths] : errors) n_errors += paths.size();
  h += "<div class='card' style='background:#555'><b>" + std::to_string(n_errors) +
       "</b>not scored (errors)</div></div>";
  h += "<p>Likely-generated means the score reached the model's threshold; it is a reason for a person to "
       "look, "
       "not a finding. Inconclusive is a normal outcome.</p>";
  h += "<h2>Score distribution</h2>" + histogram_svg(in.records);

  h += why_inconclusive(in.records);
  h += review_first(ranked, std::min(in.top, 10));
  h += "<h2>Highest scores</h2><table><tr><th>#</th><th>file</th><th>P(generated)</th><th>band</th>"
       "<th>declared</th><th>picture</th><th>residual spectrum (red marks: N/8 grid)</th></tr>";
  for (size_t i = 0; i < ranked.size() && static_cast<int>(i) < in.top; ++i) {
    const auto& r = *ranked[i];
    std::string declared = "–";
    if (r.contains("declared") && r["declared"].is_object()) {
      declared = r["declared"].value("declares_generated", false) ? "declares generated" : "camera / other";
      if (r["declared"].value("c2pa_manifest", false)) declared += "; C2PA manifest";
    }
    h += "<tr><td class='n'>" + std::to_string(i + 1) + "</td><td><code>" + html_escape(r["path"]) +
         "</code></td>" + "<td class='n'>" + fmt("%.3f", r["p_generated"].get<double>()) + "</td><td>" +
         html_escape(r["band"]) + "</td><td>" + html_escape(declared) + "</td>" + pictures_of(path_of(r)) +
         "</tr>";
  }
  h += "</table>";

  h += "<h2>Declared provenance that disagrees with the pixels</h2>";
  if (disagreements.empty()) {
    h += "<p>None: no file's metadata contradicts its band.</p>";
  } else {
    h += "<p>Metadata can be stripped or forged, and the score can be wrong: these files deserve a look "
         "because the "
         "two kinds of evidence disagree.</p><table><tr><th>file</th><th>declared</th><th>P(generated)</th>"
         "<th>band</th></tr>";
    for (const auto* r : disagreements) {
      h += "<tr><td><code>" + html_escape((*r)["path"]) + "</code></td><td>" +
           html_escape((*r)["declared"].dump()) + "</td><td class='n'>" +
           fmt("%.3f", (*r)["p_generated"].get<double>()) + "</td><td>" + html_escape((*r)["band"]) +
           "</td></tr>";
    }
    h += "</table>";
  }

  h += "<h2>By "
       "folder</h2><table><tr><th>folder</th><th>files</th><th>likely-generated</th><th>inconclusive</th>"
       "<th>likely-camera</th><th>errors</th><th>mean P</th></tr>";
  for (const auto& [folder, f] : folders) {
    const size_t n = f.files - f.errors;
    h += "<tr><td><code>" + html_escape(folder) + "</code></td><td class='n'>" + std::to_string(f.files) +
         "</td>";
    for (const char* b : kBands) {
      const auto it = f.bands.find(b);
      h += "<td class='n'>" + std::to_string(it == f.bands.end() ? 0 : it->second) + "</td>";
    }
    h += "<td class='n'>" + std::to_string(f.errors) + "</td><td class='n'>" +
         (n > 0 ? fmt("%.3f", f.p_sum / static_cast<double>(n)) : std::string("–")) + "</td></tr>";
  }
  h += "</table><h2>Errors</h2>";
  if (errors.empty()) {
    h += "<p>None.</p>";
  } else {
    h += "<table><tr><th>kind</th><th>files</th><th>examples</th></tr>";
    for (const auto& [code, paths] : errors) {
      std::string examples;
      for (size_t i = 0; i < paths.size() && i < 5; ++i)
        examples += "<code>" + html_escape(paths[i]) + "</code><br>";
      h += "<tr><td>" + html_escape(code) + "</td><td class='n'>" + std::to_string(paths.size()) +
           "</td><td>" + examples + "</td></tr>";
    }
    h += "</table>";
  }
  if (in.verdicts) {
    const VerdictAgreement& a = *in.verdicts;
    h += "<h2>Reviewers' verdicts</h2><p>" + std::to_string(a.images) +
         " of these images were judged by a reviewer (" + html_escape(in.verdicts_source) +
         "; images judged both ways are left out). The records' bands against the verdicts:</p>"
         "<table><tr><th>verdict \\ "
         "band</th><th>likely-camera</th><th>inconclusive</th><th>likely-generated</th></tr>";
    for (const char* verdict : {"camera", "generated"}) {
      h += std::string("<tr><td>") + verdict + "</td>";
      for (const char* band : {"likely-camera", "inconclusive", "likely-generated"}) {
        const bool wrong = (std::string(verdict) == "camera" && std::string(band) == "likely-generated") ||
                           (std::string(verdict) == "generated" && std::string(band) == "likely-camera");
        h += std::string("<td class='n'") +
             (wrong && a.count(verdict, band) > 0 ? " style='font-weight:bold'" : "") + ">" +
             std::to_string(a.count(verdict, band)) + "</td>";
      }
      h += "</tr>";
    }
    h += "</table><p>" + std::to_string(a.count("camera", "likely-generated")) +
         " judged camera photos were in likely-generated: people wrongly suspected. " +
         std::to_string(a.count("generated", "likely-camera")) +
         " judged generated images were in likely-camera: fakes waved through. Reviewers judge the images "
         "that reach them, not a random sample: these counts describe that queue, not the archive.</p>";
  }
  h += "<h2>Model provenance</h2>";
  if (in.model) {
    h += "<p>Reviewers' verdicts: " + html_escape(verdicts_used_text(*in.model)) + ".</p>";
    const auto& p = in.model->provenance;
    h += "<p>Model <code>" + html_escape(in.model->id) + "</code>, trained " +
         html_escape(in.model->created) + ". Likely-generated threshold " +
         fmt("%.3f", in.model->thresholds.likely_generated) + ": " +
         html_escape(promise_text(in.model->thresholds)) + ".</p><pre>" +
         html_escape(p.value("counts", nlohmann::ordered_json::object()).dump(2)) + "</pre>";
    if (const auto& c = in.model->calibration_set) {
      h += "<p>Thresholds set on " +
           std::string(c->source == "held-out" ? "camera photos the model never trained on"
                                               : "the training's out-of-fold scores") +
           ": " + std::to_string(c->camera_images) + " camera photos in " + std::to_string(c->camera_groups) +
           " groups (" + std::to_string(c->camera_guarded) + " made inconclusive by a guard), " +
           std::to_string(c->generated_images) + " generated images, " + std::to_string(c->copies) +
           " processed copies; " + html_escape(c->created) + ".</p>";
    } else {
      h += "<p>The model does not record what its thresholds were set on (trained before residue recorded "
           "it).</p>";
    }
    const auto warnings = p.value("audit_warnings", nlohmann::ordered_json::array());
    h += "<p>Training-data warnings: " + std::string(warnings.empty() ? "none." : "") + "</p><ul>";
    for (const auto& w : warnings) h += "<li>" + html_escape(w.get<std::string>()) + "</li>";
    h += "</ul>";
    if (p.contains("cross_validation")) {
      const auto& o = p["cross_validation"]["metrics"]["overall"];
      h += "<p>Cross-validated on its training data: ROC AUC " + fmt("%.3f", o.value("roc_auc", 0.0)) +
           ", ECE " + fmt("%.3f", o.value("ece", 0.0)) + ", TPR at 1 % FPR " +
           fmt("%.3f", o.value("tpr_at_fpr_1pct", 0.0)) +
           ". Images unlike that data (new generators, other compression) are scored less reliably.</p>";
    }
  } else {
    h += "<p>Run <code>residue report --model MODEL</code> to include the model's training counts, warnings "
         "and "
         "cross-validated metrics.</p>";
  }
  return h + "</body></html>\n";
}

}  // namespace residue
