#include "residue/detector/pages/comparison_page.hpp"

#include <cstdio>

#include "residue/detector/pages/evaluation_page.hpp"

namespace residue {

namespace {

std::string number(const char* format, double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, format, v);
  return buf;
}

const char* metric_label(const std::string& metric) {
  if (metric == "roc_auc") return "ROC AUC";
  if (metric == "tpr") return "generated flagged (TPR)";
  if (metric == "fpr") return "camera wrongly flagged (FPR)";
  return "calibration error (ECE)";
}

}  // namespace

std::string comparison_page(const Comparison& c, const std::string& data_description,
                            const std::vector<std::string>& notes) {
  std::string h = measurement_page_start("residue model comparison",
                                         ".better{background:#e3f1e3}.worse{background:#f8dcdc;font-weight:"
                                         "bold}.too-few{color:#777}.verdict{font-size:1.15em;"
                                         "padding:.6em 1em;border:2px solid #444}");
  h += "<p>OLD <code>" + html_escape(c.old_id) + "</code> against NEW <code>" + html_escape(c.new_id) +
       "</code>, " + html_escape(data_description) + ".</p>";
  h += std::string("<p class='verdict ") +
       (c.new_no_worse ? "better'>NEW is no worse than OLD on every row."
                       : "worse'>NEW is worse than OLD on at least one row: "
                         "do not promote it as it is.") +
       "</p>";
  h += "<table><tr><th>row</th><th>images</th><th>metric</th><th>OLD</th><th>NEW</th><th>change</th>"
       "<th>" +
       number("%.0f", 100 * c.settings.confidence) + " % interval of the change</th><th>verdict</th></tr>";
  for (const auto& row : c.rows) {
    bool first = true;
    for (const auto& m : row.metrics) {
      h += "<tr class='" + (m.verdict == "too few" ? std::string("too-few") : m.verdict) + "'>";
      if (first) {
        const std::string span = std::to_string(row.metrics.size());
        h += "<th rowspan='" + span + "'>";
        h += html_escape(row.name) + "<br><small>row: " + row.verdict + "</small></th><td rowspan='" + span +
             "'>";
        h += std::to_string(row.images) + "<br><small>" + std::to_string(row.units) +
             (row.units == 1 ? " group" : " groups") + "</small></td>";
      }
      first = false;
      h += std::string("<td style='text-align:left'>") + metric_label(m.metric) + "</td><td>" +
           number("%.3f", m.old_value) + "</td><td>" + number("%.3f", m.new_value) + "</td><td>" +
           number("%+.3f", m.change) + "</td><td>[" + number("%+.3f", m.low) + ", " +
           number("%+.3f", m.high) + "]</td><td>" + m.verdict + "</td></tr>";
    }
  }
  h += "</table><p>Change: NEW minus OLD; higher is better for ROC AUC and TPR, lower for FPR and ECE. "
       "Intervals come from "
       "a paired, stratified percentile bootstrap with " +
       std::to_string(c.settings.resamples) +
       " resamples (Efron &amp; Tibshirani 1993) that draws groups of duplicates whole (" +
       std::to_string(c.units) +
       " units; Davison &amp; Hinkley 1997): a metric is called better or worse only when its whole "
       "interval lies on one side of zero" +
       (c.settings.tolerance > 0 ? " and the change exceeds " + number("%.3f", c.settings.tolerance)
                                 : std::string()) +
       ". TPR and FPR are taken at each model's own likely-generated threshold. Rows with few images give "
       "wide "
       "intervals: a 'same' there means 'not shown to differ', not 'equal'; rows with fewer than " +
       std::to_string(c.settings.min_units) + " units are 'too few' and not judged.</p>";
  if (!notes.empty()) {
    h += "<h2>Notes</h2><ul class='warn'>";
    for (const auto& n : notes) h += "<li>" + html_escape(n) + "</li>";
    h += "</ul>";
  }
  return h + "</body></html>\n";
}

}  // namespace residue
