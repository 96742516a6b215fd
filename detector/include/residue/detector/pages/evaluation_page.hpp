// A self-contained HTML page for an evaluation: metrics table, ROC curve and reliability diagram
// drawn as inline SVG, the model's provenance and the advisory notice. No external references.
#pragma once

#include <string>

#include "residue/training/evaluation.hpp"
#include "residue/training/model.hpp"

namespace residue {

std::string evaluation_page(const EvaluationReport& report, const Model& model, const std::string& title,
                            const std::string& data_description);

// The opening of such a page up to and including its title and the advisory notice: the shared
// style sheet plus `extra_css`.
std::string measurement_page_start(const std::string& title, const std::string& extra_css);

// Escapes &, <, >, " and ' for HTML text and attribute values.
std::string html_escape(const std::string& text);

}  // namespace residue
