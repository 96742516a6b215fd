// Linear scoring pieces: standardisation and a linear C-SVC trained with liblinear (Fan et al.
// 2008; the dual coordinate descent of Hsieh et al. 2008), with libsvm kept as the reference.
//
// Conventions: samples are rows of a dense row-major matrix; labels are 0 (camera) and 1
// (generated); the margin m(x) = w . z(x) + b with z the standardised vector is positive towards
// "generated".
#pragma once

#include <vector>

#include "residue/features/status.hpp"

namespace residue {

struct Matrix {
  size_t rows = 0;
  size_t cols = 0;
  std::vector<double> data;
  [[nodiscard]] const double* row(size_t i) const { return data.data() + i * cols; }
  double* row(size_t i) { return data.data() + i * cols; }
};

// Per-column mean and standard deviation (population); a constant column gets scale 1.
struct Scaler {
  std::vector<double> mean;
  std::vector<double> scale;
  static Scaler fit(const Matrix& x);
  [[nodiscard]] Matrix apply(const Matrix& x) const;
  void apply_row(const double* in, double* out) const;
};

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
};

// Trains a linear SVM with hinge loss (liblinear's L2R_L1LOSS_SVC_DUAL: the primal of libsvm's
// C-SVC with a linear kernel, solved by dual coordinate descent) on already standardised rows.
// Needs both classes. Scales to 10^5 rows: the cost is linear in rows x values per pass.
Result<LinearModel> train_linear_svm(const Matrix& x, const std::vector<int>& labels,
                                     const SvmSettings& settings);

// The same problem solved by libsvm's C-SVC with a linear kernel (the reference the tests compare
// against; quadratic in rows, so not for large sets).
Result<LinearModel> train_linear_svm_libsvm(const Matrix& x, const std::vector<int>& labels,
                                            const SvmSettings& settings);

// Class weights inversely proportional to class frequency: n / (2 n_class), as scikit-learn's
// class_weight="balanced".
SvmSettings balanced_settings(const std::vector<int>& labels, double c);

}  // namespace residue
