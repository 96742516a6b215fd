// Standardisation and the linear SVM's dual coordinate descent on dense float rows.
#include "residue/training/linear.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <limits>
#include <numeric>
#include <random>

#include "residue/features/vector_clones.hpp"

namespace residue {

Scaler Scaler::fit(const std::vector<const double*>& rows, const std::vector<size_t>& columns) {
  Scaler s;
  s.mean.assign(columns.size(), 0.0);
  s.scale.assign(columns.size(), 0.0);
  const auto n = static_cast<double>(std::max<size_t>(rows.size(), 1));
  for (const double* r : rows) {
    for (size_t k = 0; k < columns.size(); ++k) s.mean[k] += r[columns[k]];
  }
  for (double& m : s.mean) m /= n;
  for (const double* r : rows) {
    for (size_t k = 0; k < columns.size(); ++k) s.scale[k] += std::pow(r[columns[k]] - s.mean[k], 2);
  }
  for (double& v : s.scale) {
    v = std::sqrt(v / n);
    if (v < 1e-12) v = 1.0;
  }
  return s;
}

Scaler Scaler::fit(const Matrix& x) {
  std::vector<const double*> rows(x.rows);
  for (size_t i = 0; i < x.rows; ++i) rows[i] = x.row(i);
  std::vector<size_t> columns(x.cols);
  std::iota(columns.begin(), columns.end(), size_t{0});
  return fit(rows, columns);
}

void Scaler::apply_row(const double* in, double* out) const {
  for (size_t j = 0; j < mean.size(); ++j) out[j] = (in[j] - mean[j]) / scale[j];
}

void Scaler::apply_columns(const double* in, const std::vector<size_t>& columns, float* out) const {
  for (size_t k = 0; k < columns.size(); ++k)
    out[k] = static_cast<float>((in[columns[k]] - mean[k]) / scale[k]);
}

Matrix Scaler::apply(const Matrix& x) const {
  Matrix z{x.rows, x.cols, std::vector<double>(x.data.size())};
  for (size_t i = 0; i < x.rows; ++i) apply_row(x.row(i), z.row(i));
  return z;
}

double LinearModel::margin(const double* z) const {
  double m = bias;
  for (size_t j = 0; j < weights.size(); ++j) m += weights[j] * z[j];
  return m;
}

SvmSettings balanced_settings(const std::vector<int>& labels, double c) {
  double positives = 0;
  for (int y : labels) positives += y;
  const auto n = static_cast<double>(labels.size());
  SvmSettings s;
  s.c = c;
  s.weight_generated = positives > 0 ? n / (2.0 * positives) : 1.0;
  s.weight_camera = n > positives ? n / (2.0 * (n - positives)) : 1.0;
  return s;
}

std::optional<Error> missing_class(const std::vector<int>& labels) {
  bool seen[2] = {false, false};
  for (int y : labels) seen[y != 0] = true;
  if (seen[0] && seen[1]) return std::nullopt;
  return make_error(ErrorCode::kInternal, "training needs both camera and generated examples");
}

namespace {

// w . x in double over a float row. Eight partial sums, added in a fixed order at the end: the
// compiler vectorises them, and the AVX-512, AVX2 and baseline versions give the same bits.
RESIDUE_WIDE_VECTOR_CLONES double dot_row(const double* w, const float* x, size_t n) {
  std::array<double, 8> s{};
  size_t j = 0;
  for (; j + 8 <= n; j += 8) {
    for (size_t k = 0; k < 8; ++k) s[k] += w[j + k] * static_cast<double>(x[j + k]);
  }
  double t = ((s[0] + s[1]) + (s[2] + s[3])) + ((s[4] + s[5]) + (s[6] + s[7]));
  for (; j < n; ++j) t += w[j] * static_cast<double>(x[j]);
  return t;
}

// w += a x.
RESIDUE_WIDE_VECTOR_CLONES void add_row(double* w, double a, const float* x, size_t n) {
  for (size_t j = 0; j < n; ++j) w[j] += a * static_cast<double>(x[j]);
}

// Asks for a row's cache lines ahead of use: the rows are visited in random order, which the
// hardware prefetcher cannot guess, and a pass is bound by memory traffic.
void prefetch_row(const float* x, size_t n) {
  constexpr size_t kLine = 64 / sizeof(float);
  for (size_t j = 0; j < n; j += kLine) __builtin_prefetch(x + j);
}

}  // namespace

Result<LinearModel> solve_linear_svm(const FloatRows& z, const std::vector<int>& labels,
                                     const SvmSettings& settings, SolverReport* report) {
  if (auto missing = missing_class(labels)) return *missing;
  const size_t l = z.rows;
  const size_t d = z.cols;
  const double bias = settings.bias_scale;
  // The dual: min 1/2 a'Qa - sum(a) subject to 0 <= a_i <= U_i, with Q_ij = y_i y_j x_i'x_j over
  // rows x extended by the constant `bias`, and U_i = C times the weight of i's class. The primal
  // weights w = sum(a_i y_i x_i) are kept up to date, so the gradient of coordinate i is
  // y_i w'x_i - 1 and costs one pass over row i.
  std::vector<double> w(d, 0.0);
  double w_bias = 0.0;
  std::vector<double> alpha(l, 0.0);
  std::vector<double> upper(l);
  std::vector<double> diagonal(l);  // Q_ii
  std::vector<double> y(l);
  for (size_t i = 0; i < l; ++i) {
    y[i] = labels[i] != 0 ? 1.0 : -1.0;
    upper[i] = settings.c * (labels[i] != 0 ? settings.weight_generated : settings.weight_camera);
    const float* x = z.row(i);
    double q = bias * bias;
    for (size_t j = 0; j < d; ++j) q += static_cast<double>(x[j]) * static_cast<double>(x[j]);
    diagonal[i] = q;
  }

  // Shrinking (Section 3.2): a variable at a bound whose gradient points out of the box by more
  // than the last pass's largest violation is set aside until the active set has converged; then
  // every row is checked once more.
  constexpr double kInf = std::numeric_limits<double>::infinity();
  std::vector<size_t> order(l);
  std::iota(order.begin(), order.end(), size_t{0});
  size_t active = l;
  double violation_max_old = kInf;
  double violation_min_old = -kInf;
  std::mt19937 rng(20080705);  // fixed: the same rows give the same model
  int pass = 0;
  bool converged = false;
  while (pass < settings.max_passes) {
    ++pass;
    for (size_t k = 0; k + 1 < active; ++k) std::swap(order[k], order[k + rng() % (active - k)]);
    double violation_max = -kInf;
    double violation_min = kInf;
    size_t k = 0;
    while (k < active) {
      const size_t i = order[k];
      const float* x = z.row(i);
      if (k + 1 < active) prefetch_row(z.row(order[k + 1]), d);
      const double g = y[i] * (dot_row(w.data(), x, d) + w_bias * bias) - 1.0;
      double projected = g;
      if (alpha[i] == 0.0) {
        if (g > violation_max_old) {
          std::swap(order[k], order[--active]);
          continue;
        }
        projected = std::min(g, 0.0);
      } else if (alpha[i] == upper[i]) {
        if (g < violation_min_old) {
          std::swap(order[k], order[--active]);
          continue;
        }
        projected = std::max(g, 0.0);
      }
      violation_max = std::max(violation_max, projected);
      violation_min = std::min(violation_min, projected);
      if (std::fabs(projected) > 1e-12 && diagonal[i] > 0.0) {
        const double old = alpha[i];
        alpha[i] = std::clamp(old - g / diagonal[i], 0.0, upper[i]);
        const double step = (alpha[i] - old) * y[i];
        add_row(w.data(), step, x, d);
        w_bias += step * bias;
      }
      ++k;
    }
    if (violation_max - violation_min <= settings.tolerance) {
      if (active == l) {
        converged = true;
        break;
      }
      active = l;  // the shrunk set converged: check every row again
      violation_max_old = kInf;
      violation_min_old = -kInf;
      continue;
    }
    violation_max_old = violation_max <= 0.0 ? kInf : violation_max;
    violation_min_old = violation_min >= 0.0 ? -kInf : violation_min;
  }

  if (report != nullptr) {
    double squared_norm = w_bias * w_bias;
    for (double v : w) squared_norm += v * v;
    report->passes = pass;
    report->converged = converged;
    report->dual_objective = 0.5 * squared_norm - std::accumulate(alpha.begin(), alpha.end(), 0.0);
  }
  LinearModel out;
  out.weights = std::move(w);
  out.bias = w_bias * bias;
  return out;
}

Result<LinearModel> train_linear_svm(const Matrix& x, const std::vector<int>& labels,
                                     const SvmSettings& settings) {
  FloatRows z{x.rows, x.cols, std::vector<float>(x.data.size())};
  std::transform(x.data.begin(), x.data.end(), z.data.begin(),
                 [](double v) { return static_cast<float>(v); });
  return solve_linear_svm(z, labels, settings);
}

}  // namespace residue
