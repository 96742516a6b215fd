// Linear scoring pieces: standardisation and a linear C-SVC trained by dual coordinate descent
// (Hsieh et al. 2008) on dense float rows, with liblinear (Fan et al. 2008, the same method on
// sparse rows) and libsvm kept as references.
//
// Conventions: samples are rows of a dense row-major matrix; labels are 0 (camera) and 1
// (generated); the margin m(x) = w . z(x) + b with z the standardised vector is positive towards
// "generated".
#pragma once

#include <optional>
#include <vector>

#include "residue/features/status.hpp"

namespace residue {

// Row-major rows of values: Matrix for the doubles of feature vectors, FloatRows for what the
// solver reads.
template <typename T>
struct Rows {
  size_t rows = 0;
  size_t cols = 0;
  std::vector<T> data;
  [[nodiscard]] const T* row(size_t i) const { return data.data() + i * cols; }
  T* row(size_t i) { return data.data() + i * cols; }
};
using Matrix = Rows<double>;

// Per-column mean and standard deviation (population); a constant column gets scale 1.
struct Scaler {
  std::vector<double> mean;
  std::vector<double> scale;
  static Scaler fit(const Matrix& x);
  // Fitted on the values `columns` of each row (rows: whole feature vectors).
  static Scaler fit(const std::vector<const double*>& rows, const std::vector<size_t>& columns);
  [[nodiscard]] Matrix apply(const Matrix& x) const;
  void apply_row(const double* in, double* out) const;
  // The values `columns` of a whole vector, standardised, as floats.
  void apply_columns(const double* in, const std::vector<size_t>& columns, float* out) const;
};

// Standardised training rows as float32: what the solver reads. Four bytes a value (liblinear's
// sparse nodes take sixteen, and the solver's passes are bound by memory traffic); standardised
// values are of order 1, where float's 24-bit mantissa loses nothing the tolerance of the solver
// would notice.
using FloatRows = Rows<float>;

struct LinearModel {
  std::vector<double> weights;
  double bias = 0.0;
  [[nodiscard]] double margin(const double* z) const;  // z: a standardised row
};

struct SvmSettings {
  double c = 1.0;
  double weight_generated = 1.0;  // class weights multiply C per class (-wi in both libraries)
  double weight_camera = 1.0;
  // Stopping tolerance (-e): liblinear's own default for its dual solvers, 0.1 (on the projected
  // gradient; 1e-3 took 2.4x longer on `residue bench --training-size 500`).
  // libsvm's reference is run at 1e-3, scikit-learn's SVC default.
  double tolerance = 0.1;
  // liblinear learns the bias as the weight of a constant feature of this value, so the bias is
  // regularised as (b / bias_scale)^2 (scikit-learn's LinearSVC intercept_scaling). libsvm does
  // not regularise it; a larger scale comes closer to libsvm and converges more slowly.
  double bias_scale = 1.0;
  // Passes over the active rows before giving up (liblinear's limit for its dual solvers).
  int max_passes = 1000;
};

// What a solve did: passes, whether the projected-gradient gap fell below the tolerance, and the
// dual objective 1/2 |w|^2 - sum(alpha) at the end (w including the bias feature's weight).
struct SolverReport {
  int passes = 0;
  bool converged = false;
  double dual_objective = 0.0;
};

// Trains a linear SVM with hinge loss on standardised rows: the primal of libsvm's C-SVC with a
// linear kernel, with the bias learnt as the weight of a constant feature `bias_scale`
// (liblinear's L2R_L1LOSS_SVC_DUAL), solved by the dual coordinate descent of Hsieh, Chang, Lin,
// Keerthi & Sundararajan (2008), Algorithm 1: rows in a fresh random order each pass (a fixed
// seed, so the same rows give the same model), with the shrinking of their Section 3.2. Needs both
// classes. The cost is linear in rows x values per pass; the number of passes grows with C and
// with the overlap of the classes (docs/performance.md).
//
// No warm start across C: started from the solution of the next smaller C of our grid, the dual
// needed as many passes as from zero or more (measured on overlapping simulated clouds; Chu, Ho,
// Lin & Lin 2015 report the same of dual warm starts).
Result<LinearModel> solve_linear_svm(const FloatRows& z, const std::vector<int>& labels,
                                     const SvmSettings& settings, SolverReport* report = nullptr);

// solve_linear_svm on double rows (rounded to float first).
Result<LinearModel> train_linear_svm(const Matrix& x, const std::vector<int>& labels,
                                     const SvmSettings& settings);

// The same problem solved by liblinear itself (a reference for the tests: same method, its own
// random order, so the solutions agree to the tolerance, not bit for bit).
Result<LinearModel> train_linear_svm_liblinear(const Matrix& x, const std::vector<int>& labels,
                                               const SvmSettings& settings);

// The same problem solved by libsvm's C-SVC with a linear kernel (the reference the tests compare
// against; quadratic in rows, so not for large sets).
Result<LinearModel> train_linear_svm_libsvm(const Matrix& x, const std::vector<int>& labels,
                                            const SvmSettings& settings);

// Class weights inversely proportional to class frequency: n / (2 n_class), as scikit-learn's
// class_weight="balanced".
SvmSettings balanced_settings(const std::vector<int>& labels, double c);

// The error every solver gives when `labels` lack a class; nullopt when both are there.
std::optional<Error> missing_class(const std::vector<int>& labels);

}  // namespace residue
