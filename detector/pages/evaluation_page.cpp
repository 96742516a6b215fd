#include "residue/detector/pages/evaluation_page.hpp"

#include <cstdio>

#include "residue/detector/scoring/record.hpp"

namespace residue {

namespace {

// Plot area: 300 x 300 px inside a 360 x 350 SVG; data coordinates in [0, 1]^2.
constexpr double kLeft = 45, kTop = 15, kSize = 300;

std::string fmt(const char* f, double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, f, v);
  return buf;
}

std::string px(double v, bool vertical) {
  return fmt("%.1f", vertical ? kTop + kSize * (1.0 - v) : kLeft + kSize * v);
}

std::string axes(const std::string& x_label, const std::string& y_label) {
  std::string s = "<rect x='" + px(0, false) + "' y='" + px(1, true) +
                  "' width='300' height='300' fill='#fff' "
                  "stroke='#444'/>";
  for (int k = 0; k <= 4; ++k) {
    const double v = k / 4.0;
    s += "<line x1='" + px(v, false) + "' y1='" + px(0, true) + "' x2='" + px(v, false) + "' y2='" +
         px(1, true) + "' stroke='#ddd'/>";
    s += "<line x1='" + px(0, false) + "' y1='" + px(v, true) + "' x2='" + px(1, false) + "' y2='" +
         px(v, true) + "' stroke='#ddd'/>";
    s += "<text x='" + px(v, false) + "' y='332' font-size='11' text-anchor='middle'>" + fmt("%.2f", v) +
         "</text>";
    s += "<text x='40' y='" + fmt("%.1f", kTop + kSize * (1.0 - v) + 4) +
         "' font-size='11' text-anchor='end'>" + fmt("%.2f", v) + "</text>";
  }
  s += "<text x='195' y='348' font-size='12' text-anchor='middle'>" + x_label + "</text>";
  s += "<text x='12' y='165' font-size='12' text-anchor='middle' transform='rotate(-90 12 165)'>" + y_label +
       "</text>";
  return s;
}

// Opens a square chart with its axes and the dashed diagonal (chance / perfect calibration).
std::string chart_with_diagonal(const std::string& label, const std::string& x_label,
                                const std::string& y_label) {
  return "<svg xmlns='http://www.w3.org/2000/svg' width='360' height='355' role='img' aria-label='" + label +
         "'>" + axes(x_label, y_label) + "<line x1='" + px(0, false) + "' y1='" + px(0, true) + "' x2='" +
         px(1, false) + "' y2='" + px(1, true) + "' stroke='#999' stroke-dasharray='4 4'/>";
}

std::string roc_svg(const EvaluationReport& r) {
  std::string s =
      chart_with_diagonal("ROC curve", "false-positive rate (camera called generated)", "true-positive rate");
  std::string points;
  for (const auto& p : r.roc) points += px(p.fpr, false) + "," + px(p.tpr, true) + " ";
  s += "<polyline fill='none' stroke='#1f5fa8' stroke-width='2' points='" + points + "'/></svg>";
  return s;
}

std::string reliability_svg(const EvaluationReport& r) {
  std::string s =
      chart_with_diagonal("Reliability diagram", "predicted P(generated)", "observed share generated");
  for (const auto& b : r.reliability) {
    if (b.count == 0) continue;
    const double x0 = b.low + 0.01;
    const double w = (b.high - b.low - 0.02) * kSize;
    s += "<rect x='" + px(x0, false) + "' y='" + px(b.observed, true) + "' width='" + fmt("%.1f", w) +
         "' height='" + fmt("%.1f", kSize * b.observed) + "' fill='#8fb3de' stroke='#1f5fa8'><title>" +
         std::to_string(b.count) + " images, mean predicted " + fmt("%.2f", b.mean_predicted) +
         ", observed " + fmt("%.2f", b.observed) + "</title></rect>";
    s += "<circle cx='" + px(b.mean_predicted, false) + "' cy='" + px(b.observed, true) +
         "' r='3' fill='#c0392b'/>";
  }
  return s + "</svg>";
}

std::string metrics_row(const std::string& name, const MetricSet& m) {
  auto cell = [&](double v) {
    return "<td>" + (m.has_both_classes() ? fmt("%.3f", v) : std::string("–")) + "</td>";
  };
  return "<tr><th>" + html_escape(name) + "</th><td>" + std::to_string(m.camera) + "</td><td>" +
         std::to_string(m.generated) + "</td>" + cell(m.roc_auc) + cell(m.average_precision) +
         cell(m.tpr_at_fpr_1) + cell(m.tpr_at_fpr_5) + "<td>" + fmt("%.3f", m.ece) + "</td><td>" +
         fmt("%.3f", m.brier) + "</td><td>" + std::to_string(m.confusion.false_positive) + "</td><td>" +
         std::to_string(m.confusion.false_negative) + "</td></tr>";
}

}  // namespace

std::string html_escape(const std::string& text) {
  std::string out;
  out.reserve(text.size());
  for (char c : text) {
    switch (c) {
      case '&':
        out += "&amp;";
        break;
      case '<':
        out += "&lt;";
        break;
      case '>':
        out += "&gt;";
        break;
      case '"':
        out += "&quot;";
        break;
      case '\'':
        out += "&#39;";
        break;
      default:
        out.push_back(c);
    }
  }
  return out;
}

std::string measurement_page_start(const std::string& title, const std::string& extra_css) {
  return "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>" + html_escape(title) +
         "</title><style>body{font-family:sans-serif;max-width:1000px;margin:2em auto;color:#222;padding:0 "
         "1em}"
         ".advisory{border-left:5px solid #c0392b;background:#fbeeee;padding:.6em 1em}"
         "table{border-collapse:collapse;margin:1em 0}td,th{border:1px solid #ccc;padding:.3em .6em;"
         "text-align:right}th{text-align:left;background:#f4f4f4}.plots{display:flex;flex-wrap:wrap;gap:2em}"
         "figure{margin:0}figcaption{font-size:.9em;color:#555;max-width:360px}"
         "ul.warn li{color:#8a4b00}@media print{.plots{display:block}}" +
         extra_css + "</style></head><body><h1>" + html_escape(title) + "</h1><p class='advisory'>" +
         html_escape(kAdvisoryNotice) + "</p>";
}

std::string evaluation_page(const EvaluationReport& r, const Model& model, const std::string& title,
                            const std::string& data_description) {
  std::string h = measurement_page_start(title, "");
  h += "<p>Model <code>" + html_escape(model.id) + "</code>, trained " + html_escape(model.created) + "; " +
       html_escape(data_description) + ". Decision threshold P(generated) &ge; " +
       fmt("%.3f", model.thresholds.likely_generated) + " (chosen for " +
       fmt("%.1f", 100 * model.thresholds.target_fpr) +
       " % false positives on the training camera images).</p>";
  const MetricSet& all = r.overall;
  h += "<p style='font-size:1.15em'><b>Overall:</b> ROC AUC " +
       (all.has_both_classes() ? fmt("%.3f", all.roc_auc) : std::string("–")) + ". At the threshold, " +
       std::to_string(all.confusion.true_positive) + " of " + std::to_string(all.generated) +
       " generated images were flagged and " + std::to_string(all.confusion.false_positive) + " of " +
       std::to_string(all.camera) + " camera images were wrongly flagged.</p>";
  h += "<h2>Metrics</h2><table><tr><th>generator</th><th>camera</th><th>generated</th><th>ROC "
       "AUC</th><th>AP</th>"
       "<th>TPR at 1 % FPR</th><th>TPR at 5 % FPR</th><th>ECE</th><th>Brier</th><th>false pos.</th>"
       "<th>false neg.</th></tr>";
  for (const auto& [name, m] : r.per_generator) h += metrics_row(name, m);
  h += metrics_row("all generators", r.overall) + "</table>";
  h += "<p>Each generator row compares that generator's images with all camera images. ECE: expected "
       "calibration "
       "error, 15 bins (Guo et al. 2017). Rows with few images are anecdotes, not measurements.</p>";
  h += "<div class='plots'><figure>" + roc_svg(r) +
       "<figcaption>ROC curve: each point is a threshold; higher and further left is better. The dashed line "
       "is "
       "chance.</figcaption></figure><figure>" +
       reliability_svg(r) +
       "<figcaption>Reliability: bars show the share of generated images among those given a score in each "
       "tenth; red dots sit at the mean score. On the dashed line the scores mean what they say.</figcaption>"
       "</figure></div>";
  const auto& warnings = model.provenance.value("audit_warnings", nlohmann::ordered_json::array());
  h += "<h2>Training data warnings</h2>";
  if (warnings.empty()) {
    h += "<p>None.</p>";
  } else {
    h += "<ul class='warn'>";
    for (const auto& w : warnings) h += "<li>" + html_escape(w.get<std::string>()) + "</li>";
    h += "</ul>";
  }
  h += "<h2>Model provenance</h2><table>";
  const auto counts = model.provenance.value("counts", nlohmann::ordered_json::object());
  h += "<tr><th>camera images</th><td>" + counts.value("camera", nlohmann::ordered_json(0)).dump() +
       "</td></tr>";
  const auto per_generator = counts.value("per_generator", nlohmann::ordered_json::object());
  for (const auto& [name, n] : per_generator.items()) {
    h += "<tr><th>generated: " + html_escape(name) + "</th><td>" + n.dump() + "</td></tr>";
  }
  const auto cv = model.provenance.value("cross_validation", nlohmann::ordered_json::object());
  if (cv.contains("metrics")) {
    h += "<tr><th>cross-validated ROC AUC (" + cv.value("folds", nlohmann::ordered_json(0)).dump() +
         " folds, grouped by " + html_escape(cv.value("group_by", std::string("?"))) + ")</th><td>" +
         fmt("%.3f", cv["metrics"]["overall"].value("roc_auc", 0.0)) + "</td></tr>";
    h += "<tr><th>cross-validated ECE</th><td>" + fmt("%.3f", cv["metrics"]["overall"].value("ece", 0.0)) +
         "</td></tr>";
  }
  h += "</table></body></html>\n";
  return h;
}

}  // namespace residue
