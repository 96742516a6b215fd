// A self-contained HTML page for an evaluation: metrics table, ROC curve and reliability diagram
// drawn as inline SVG, the model's provenance and the advisory notice. No external references.
#pragma once

#include <string>

#include "residue/training/evaluation.hpp"
#include "residue/training/model.hpp"

namespace residue {

std::string evaluation_page(const EvaluationReport& report, const Model& model, const std::string& title,
                            const std::string& data_description);

// Escapes &, <, >, " and ' for HTML text and attribute values.
std::string html_escape(const std::string& text);

}  // namespace residue
