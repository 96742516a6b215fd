#include "residue/training/calibration.hpp"

#include <algorithm>
#include <cmath>

namespace residue {

double PlattSigmoid::probability(double margin) const {
  // Written to avoid overflow for large |A m + B| (Lin, Lin & Weng 2007, Sec. 3).
  const double f = a * margin + b;
  return f >= 0 ? std::exp(-f) / (1.0 + std::exp(-f)) : 1.0 / (1.0 + std::exp(f));
}

PlattSigmoid fit_platt(const std::vector<double>& margins, const std::vector<int>& labels) {
  const size_t n = margins.size();
  double prior1 = 0;
  for (int y : labels) prior1 += y != 0 ? 1 : 0;
  const double prior0 = static_cast<double>(n) - prior1;
  // Targets smoothed by the priors (Platt 1999; Lin, Lin & Weng 2007, Algorithm 1).
  const double hi = (prior1 + 1.0) / (prior1 + 2.0);
  const double lo = 1.0 / (prior0 + 2.0);
  std::vector<double> t(n);
  for (size_t i = 0; i < n; ++i) t[i] = labels[i] != 0 ? hi : lo;

  const int max_iterations = 100;
  const double min_step = 1e-10;
  const double sigma = 1e-12;  // keeps the Hessian positive definite
  const double eps = 1e-5;
  double a = 0.0;
  double b = std::log((prior0 + 1.0) / (prior1 + 1.0));
  auto objective = [&](double aa, double bb) {
    double f = 0.0;
    for (size_t i = 0; i < n; ++i) {
      const double fa = margins[i] * aa + bb;
      f += fa >= 0 ? t[i] * fa + std::log1p(std::exp(-fa)) : (t[i] - 1) * fa + std::log1p(std::exp(fa));
    }
    return f;
  };
  double fval = objective(a, b);
  for (int it = 0; it < max_iterations; ++it) {
    double h11 = sigma, h22 = sigma, h21 = 0.0, g1 = 0.0, g2 = 0.0;
    for (size_t i = 0; i < n; ++i) {
      const double fa = margins[i] * a + b;
      double p = 0.0;
      double q = 0.0;
      if (fa >= 0) {
        p = std::exp(-fa) / (1.0 + std::exp(-fa));
        q = 1.0 / (1.0 + std::exp(-fa));
      } else {
        p = 1.0 / (1.0 + std::exp(fa));
        q = std::exp(fa) / (1.0 + std::exp(fa));
      }
      const double d2 = p * q;
      h11 += margins[i] * margins[i] * d2;
      h22 += d2;
      h21 += margins[i] * d2;
      const double d1 = t[i] - p;
      g1 += margins[i] * d1;
      g2 += d1;
    }
    if (std::fabs(g1) < eps && std::fabs(g2) < eps) break;
    const double det = h11 * h22 - h21 * h21;
    const double da = -(h22 * g1 - h21 * g2) / det;
    const double db = -(-h21 * g1 + h11 * g2) / det;
    const double gd = g1 * da + g2 * db;
    double step = 1.0;
    while (step >= min_step) {
      const double na = a + step * da;
      const double nb = b + step * db;
      const double nf = objective(na, nb);
      if (nf < fval + 0.0001 * step * gd) {
        a = na;
        b = nb;
        fval = nf;
        break;
      }
      step /= 2.0;
    }
    if (step < min_step) break;  // line search failed
  }
  return {a, b};
}

double shift_prior(double p, double training_prior, double deployment_prior) {
  p = std::clamp(p, 1e-12, 1.0 - 1e-12);
  const double odds = p / (1.0 - p);
  const double ratio =
      (deployment_prior / (1.0 - deployment_prior)) / (training_prior / (1.0 - training_prior));
  const double shifted = odds * ratio;
  return shifted / (1.0 + shifted);
}

}  // namespace residue
