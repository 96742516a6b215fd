// Linear SVM, Platt calibration and metrics against scikit-learn (Debian python3-sklearn), and
// worked examples by hand for ECE, prior shift and thresholds.
#include <doctest/doctest.h>

#include <cmath>
#include <fstream>
#include <random>
#include <sstream>

#include "residue/training/calibration.hpp"
#include "residue/training/linear.hpp"
#include "residue/training/metrics.hpp"
#include "support.hpp"

using namespace residue;

namespace {

struct Labelled {
  Matrix x;
  std::vector<int> y;
};

Labelled read_csv(const std::filesystem::path& path) {
  std::ifstream in(path);
  Labelled d;
  std::string line;
  while (std::getline(in, line)) {
    std::stringstream ss(line);
    std::string cell;
    std::getline(ss, cell, ',');
    d.y.push_back(static_cast<int>(std::stod(cell)));
    size_t cols = 0;
    while (std::getline(ss, cell, ',')) {
      d.x.data.push_back(std::stod(cell));
      ++cols;
    }
    d.x.cols = cols;
    ++d.x.rows;
  }
  return d;
}

void write_pairs(const std::filesystem::path& path, const std::vector<int>& y, const std::vector<double>& s) {
  std::ofstream out(path);
  out.precision(17);
  for (size_t i = 0; i < y.size(); ++i) out << y[i] << "," << s[i] << "\n";
}

using Trainer = Result<LinearModel> (*)(const Matrix&, const std::vector<int>&, const SvmSettings&);

// Trains with `trainer` at `tolerance` on the breast-cancer data for C = 0.1 and 1 and compares
// the decision values with the reference script's `mode` within `relative` of the largest |value|.
void check_against_scikit_learn(const std::string& mode, Trainer trainer, double tolerance, double relative) {
  const auto csv = test::scratch() / "breast_cancer.csv";
  test::python("svm_reference.py", {"data", csv.string()});
  const Labelled d = read_csv(csv);
  REQUIRE(d.x.rows == 569);
  REQUIRE(d.x.cols == 30);
  for (double c : {0.1, 1.0}) {
    CAPTURE(c);
    const auto expected =
        test::numbers(test::python("svm_reference.py", {mode, csv.string(), std::to_string(c)}));
    REQUIRE(expected.size() == d.x.rows);
    SvmSettings s = balanced_settings(d.y, c);
    s.tolerance = tolerance;
    auto model = trainer(d.x, d.y, s);
    REQUIRE(model.ok());
    double largest = 0;
    for (double e : expected) largest = std::max(largest, std::fabs(e));
    for (size_t i = 0; i < d.x.rows; ++i)
      CHECK(std::fabs(model->margin(d.x.row(i)) - expected[i]) <= relative * largest);
  }
}

}  // namespace

TEST_CASE(
    "liblinear solver: decision values equal scikit-learn's LinearSVC(loss='hinge') on breast-cancer data") {
  // scikit-learn's LinearSVC bundles liblinear; with loss="hinge" and intercept_scaling=1 it solves
  // our problem (L2R_L1LOSS_SVC_DUAL, bias feature 1). Both are run to a tight tolerance, so the
  // decision values agree to 1e-3 of the largest |value|.
  check_against_scikit_learn("linear", train_linear_svm, 1e-7, 1e-3);
}

TEST_CASE(
    "libsvm reference: decision values equal scikit-learn's SVC(kernel='linear') on breast-cancer data") {
  // scikit-learn wraps libsvm too; both solve the same dual to tolerance 1e-3, so decision values
  // agree to about that tolerance (we allow 5e-3 of the largest |value|).
  check_against_scikit_learn("svm", train_linear_svm_libsvm, 1e-3, 5e-3);
}

TEST_CASE(
    "liblinear and libsvm solve the same SVM: decision values close, signs equal away from the boundary") {
  // The two differ only in that liblinear regularises the bias (as the weight of a constant
  // feature): on standardised data the margins stay within 2 % of the largest |value| (our
  // tolerance; scikit-learn's SVC against its LinearSVC(loss="hinge") differ by 0.4-0.5 % here)
  // and no clear-cut sample changes side.
  const auto csv = test::scratch() / "breast_cancer.csv";
  test::python("svm_reference.py", {"data", csv.string()});
  const Labelled d = read_csv(csv);
  for (double c : {0.1, 1.0}) {
    CAPTURE(c);
    SvmSettings s = balanced_settings(d.y, c);
    s.tolerance = 1e-3;
    auto fast = train_linear_svm(d.x, d.y, s);
    auto reference = train_linear_svm_libsvm(d.x, d.y, s);
    REQUIRE(fast.ok());
    REQUIRE(reference.ok());
    double largest = 0, worst = 0;
    int sign_disagreements = 0;
    for (size_t i = 0; i < d.x.rows; ++i) {
      const double r = reference->margin(d.x.row(i));
      const double m = fast->margin(d.x.row(i));
      largest = std::max(largest, std::fabs(r));
      worst = std::max(worst, std::fabs(m - r));
      sign_disagreements += (m >= 0) != (r >= 0) && std::fabs(r) > 0.1;
    }
    CAPTURE(worst / largest);
    CHECK(worst <= 0.02 * largest);
    CHECK(sign_disagreements == 0);
  }
}

TEST_CASE("balanced class weights are n / (2 n_class), as scikit-learn's class_weight='balanced'") {
  const std::vector<int> y = {1, 0, 0, 0};  // 1 generated, 3 camera
  const SvmSettings s = balanced_settings(y, 2.0);
  CHECK(s.c == 2.0);
  CHECK(s.weight_generated == doctest::Approx(2.0));     // 4 / (2 * 1)
  CHECK(s.weight_camera == doctest::Approx(4.0 / 6.0));  // 4 / (2 * 3)
}

TEST_CASE("Platt parameters A, B equal scikit-learn's sigmoid calibration") {
  // Margins of an imperfect classifier: two overlapping Gaussians (made up by this test).
  std::mt19937 rng(3);
  std::normal_distribution<double> camera(-1.0, 1.2);
  std::normal_distribution<double> generated(1.0, 0.8);
  std::vector<double> margins;
  std::vector<int> labels;
  for (int i = 0; i < 300; ++i) {
    const bool g = i % 3 == 0;
    margins.push_back(g ? generated(rng) : camera(rng));
    labels.push_back(g ? 1 : 0);
  }
  const auto path = test::scratch() / "margins.csv";
  write_pairs(path, labels, margins);
  const auto expected = test::numbers(test::python("svm_reference.py", {"platt", path.string()}));
  REQUIRE(expected.size() == 2);
  const PlattSigmoid fit = fit_platt(margins, labels);
  // Both minimise the same convex objective (Newton here, BFGS there) to about 1e-5.
  CHECK(fit.a == doctest::Approx(expected[0]).epsilon(1e-3));
  CHECK(fit.b == doctest::Approx(expected[1]).epsilon(1e-3));
  CHECK(fit.a < 0);  // larger margins mean "generated"
  CHECK(fit.probability(5.0) > fit.probability(-5.0));
}

TEST_CASE("ROC AUC, average precision and Brier score equal sklearn.metrics, ties included") {
  const std::vector<int> y = {0, 0, 1, 1, 0, 1, 1, 0, 1, 0, 0, 1};
  const std::vector<double> s = {0.1, 0.4, 0.35, 0.8, 0.4, 0.9, 0.4, 0.05, 0.7, 0.6, 0.2, 0.35};
  const auto path = test::scratch() / "scores.csv";
  write_pairs(path, y, s);
  const auto expected = test::numbers(test::python("metrics_reference.py", {path.string()}));
  REQUIRE(expected.size() == 3);
  CHECK(roc_auc(s, y) == doctest::Approx(expected[0]).epsilon(1e-12));
  CHECK(average_precision(s, y) == doctest::Approx(expected[1]).epsilon(1e-12));
  CHECK(brier_score(s, y) == doctest::Approx(expected[2]).epsilon(1e-12));
}

TEST_CASE("ECE equals a worked example (Guo et al. 2017, Eq. 3, 15 bins)") {
  // p = 0.9 (y=1), 0.9 (y=0), 0.2 (y=0), 0.55 (y=1).
  // Confidences: 0.9, 0.9, 0.8, 0.55. Bins of width 1/15: 0.9 -> bin (0.8667, 0.9333];
  // 0.8 -> (0.7333, 0.8]; 0.55 -> (0.5333, 0.6].
  // Bin of 0.9: accuracy 1/2, confidence 0.9 -> |0.5 - 0.9| * 2/4 = 0.2.
  // Bin of 0.8: correct (predicted camera, is camera) -> |1 - 0.8| * 1/4 = 0.05.
  // Bin of 0.55: correct -> |1 - 0.55| * 1/4 = 0.1125. ECE = 0.3625.
  const std::vector<double> p = {0.9, 0.9, 0.2, 0.55};
  const std::vector<int> y = {1, 0, 0, 1};
  CHECK(expected_calibration_error(p, y, 15) == doctest::Approx(0.3625).epsilon(1e-12));
}

TEST_CASE("prior shift follows Bayes' rule on the odds (worked by hand)") {
  // p = 0.8 at a training base rate of 0.5: odds 4. Deployment base rate 0.01: prior odds ratio
  // (0.01/0.99) / (0.5/0.5) = 1/99, odds 4/99, p' = 4/103 = 0.038835.
  CHECK(shift_prior(0.8, 0.5, 0.01) == doctest::Approx(4.0 / 103.0).epsilon(1e-9));
  // Same base rate: unchanged.
  CHECK(shift_prior(0.3, 0.2, 0.2) == doctest::Approx(0.3).epsilon(1e-12));
  // Training at 0.2, deployment at 0.5: odds x 4. p = 0.5 -> odds 4 -> 0.8.
  CHECK(shift_prior(0.5, 0.2, 0.5) == doctest::Approx(0.8).epsilon(1e-12));
}

TEST_CASE("threshold for a target FPR and TPR at that FPR, worked by hand") {
  // 10 camera scores; 1 % of 10 allows 0 above the threshold: it sits just above the top one.
  std::vector<double> camera = {0.1, 0.2, 0.3, 0.35, 0.4, 0.5, 0.55, 0.6, 0.7, 0.9};
  CHECK(threshold_for_fpr(camera, 0.01) > 0.9);
  CHECK(threshold_for_fpr(camera, 0.01) < 0.9000001);
  // 20 % allows 2: just above the third highest (0.6), so 0.7 and 0.9 are at or above it.
  const double t = threshold_for_fpr(camera, 0.2);
  CHECK(t > 0.6);
  CHECK(t <= 0.7);
  // TPR at FPR: scores 0.95, 0.8 generated, above all camera but 0.9 -> at FPR 0 TPR is 1/2.
  std::vector<double> s = camera;
  std::vector<int> y(camera.size(), 0);
  s.insert(s.end(), {0.95, 0.8});
  y.insert(y.end(), {1, 1});
  CHECK(tpr_at_fpr(s, y, 0.0) == doctest::Approx(0.5));
  CHECK(tpr_at_fpr(s, y, 0.1) == doctest::Approx(1.0));
}
