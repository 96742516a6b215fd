// Probability calibration: Platt's sigmoid P(generated | m) = 1 / (1 + exp(A m + B)) fitted with
// the algorithm of Lin, Lin & Weng (2007), "A note on Platt's probabilistic outputs for support
// vector machines" (priors-smoothed targets, Newton's method with backtracking line search); and
// the shift of a calibrated probability to another base rate by Bayes' rule on the odds.
#pragma once

#include <vector>

namespace residue {

struct PlattSigmoid {
  double a = -1.0;
  double b = 0.0;
  [[nodiscard]] double probability(double margin) const;
};

// Fits A, B on margins and labels (0/1). Needs at least one of each label.
PlattSigmoid fit_platt(const std::vector<double>& margins, const std::vector<int>& labels);

// p calibrated where generated images made up `training_prior` of the data, moved to a
// deployment base rate `deployment_prior`:
//   odds' = odds * (prior' / (1 - prior')) / (prior / (1 - prior)),  p' = odds' / (1 + odds').
double shift_prior(double p, double training_prior, double deployment_prior);

}  // namespace residue
