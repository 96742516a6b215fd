// A self-contained HTML page for `residue compare`: the verdict, one table row per metric with
// both models' values, the change and its bootstrap interval, and the notes the command printed.
#pragma once

#include <string>
#include <vector>

#include "residue/training/comparison.hpp"

namespace residue {

std::string comparison_page(const Comparison& comparison, const std::string& data_description,
                            const std::vector<std::string>& notes);

}  // namespace residue
