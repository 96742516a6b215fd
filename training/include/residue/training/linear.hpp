// Linear scoring pieces: standardisation and a linear C-SVC trained with libsvm.
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
  double weight_generated = 1.0;  // class weights multiply C per class (libsvm -wi)
  double weight_camera = 1.0;
  double tolerance = 1e-3;  // libsvm -e, as scikit-learn's SVC default tol
};

// Trains libsvm's C-SVC with a linear kernel on already standardised rows. Needs both classes.
Result<LinearModel> train_linear_svm(const Matrix& x, const std::vector<int>& labels,
                                     const SvmSettings& settings);

// Class weights inversely proportional to class frequency: n / (2 n_class), as scikit-learn's
// class_weight="balanced".
SvmSettings balanced_settings(const std::vector<int>& labels, double c);

}  // namespace residue
