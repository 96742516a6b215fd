// Linear SVM, Platt calibration and metrics against scikit-learn (Debian python3-sklearn), and
// worked examples by hand for ECE, prior shift and thresholds.
#include <doctest/doctest.h>

#include <cmath>
#include <fstream>
#include <random>
#include <sstream>

#include "residue/features/fingerprint.hpp"
#include "residue/training/calibration.hpp"
#include "residue/training/linear.hpp"
#include "residue/training/metrics.hpp"
#include "residue/training/trainer.hpp"
#include "simulated_items.hpp"
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
    "dual coordinate descent: decision values equal scikit-learn's LinearSVC(loss='hinge') on breast-cancer "
    "data") {
  // scikit-learn's LinearSVC bundles liblinear; with loss="hinge" and intercept_scaling=1 it solves
  // our problem (L2R_L1LOSS_SVC_DUAL, bias feature 1). Both are run to a tight tolerance, so the
  // decision values agree to 1e-3 of the largest |value| (our rows are rounded to float first).
  check_against_scikit_learn("linear", train_linear_svm, 1e-7, 1e-3);
}

TEST_CASE(
    "liblinear reference: decision values equal scikit-learn's LinearSVC(loss='hinge') on breast-cancer "
    "data") {
  check_against_scikit_learn("linear", train_linear_svm_liblinear, 1e-7, 1e-3);
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

namespace {

// Two overlapping Gaussian clouds in `d` dimensions, one class in four generated, standardised
// (made up by this test: the hard case for a dual solver, where most rows end up support vectors).
Labelled overlapping_clouds(size_t n, size_t d, unsigned seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> noise(0.0, 1.0);
  Labelled out;
  out.x = Matrix{n, d, std::vector<double>(n * d)};
  for (size_t i = 0; i < n; ++i) {
    const int y = i % 4 == 0 ? 1 : 0;
    out.y.push_back(y);
    for (size_t j = 0; j < d; ++j) out.x.row(i)[j] = noise(rng) + (y == 1 && j % 3 == 0 ? 1.0 : 0.0);
  }
  out.x = Scaler::fit(out.x).apply(out.x);
  return out;
}

// The primal objective the solvers minimise: 1/2 (|w|^2 + (b / bias_scale)^2) + sum C_i hinge_i
// (Hsieh et al. 2008, Eq. 1, with the bias as a constant feature).
double primal_objective(const LinearModel& m, const Labelled& d, const SvmSettings& s) {
  const double wb = m.bias / s.bias_scale;
  double value = 0.5 * wb * wb;
  for (double w : m.weights) value += 0.5 * w * w;
  for (size_t i = 0; i < d.x.rows; ++i) {
    const double y = d.y[i] == 1 ? 1.0 : -1.0;
    const double c = s.c * (d.y[i] == 1 ? s.weight_generated : s.weight_camera);
    value += c * std::max(0.0, 1.0 - y * m.margin(d.x.row(i)));
  }
  return value;
}

FloatRows as_float(const Matrix& x) {
  FloatRows z{x.rows, x.cols, std::vector<float>(x.data.size())};
  for (size_t i = 0; i < x.data.size(); ++i) z.data[i] = static_cast<float>(x.data[i]);
  return z;
}

}  // namespace

TEST_CASE("dual coordinate descent reaches liblinear's optimum, with a duality gap near zero") {
  // The primal is strictly convex, so both solvers must find the same w; by weak duality the
  // primal objective at w is never below the dual's value, and at the optimum they meet (Hsieh et
  // al. 2008, Section 2). 3,000 x 40, tolerance 1e-4, where liblinear converges within its 1,000
  // passes.
  const Labelled d = overlapping_clouds(3000, 40, 11);
  for (double c : {0.001, 0.01}) {
    CAPTURE(c);
    SvmSettings s = balanced_settings(d.y, c);
    s.tolerance = 1e-4;
    s.max_passes = 100000;  // overlapping clouds need thousands of passes at this tolerance
    SolverReport report;
    auto ours = solve_linear_svm(as_float(d.x), d.y, s, &report);
    auto reference = train_linear_svm_liblinear(d.x, d.y, s);
    REQUIRE(ours.ok());
    REQUIRE(reference.ok());
    CHECK(report.converged);
    const double p_ours = primal_objective(*ours, d, s);
    const double p_reference = primal_objective(*reference, d, s);
    CAPTURE(p_ours);
    CAPTURE(p_reference);
    CHECK(p_ours == doctest::Approx(p_reference).epsilon(1e-4));
    const double gap = p_ours + report.dual_objective;  // primal minus the dual's maximum
    CHECK(gap >= -1e-9 * p_ours);
    CHECK(gap <= 1e-3 * p_ours);
    double largest = 0.0, worst = 0.0;
    for (size_t i = 0; i < d.x.rows; ++i) {
      largest = std::max(largest, std::fabs(reference->margin(d.x.row(i))));
      worst = std::max(worst, std::fabs(ours->margin(d.x.row(i)) - reference->margin(d.x.row(i))));
    }
    CHECK(worst <= 1e-2 * largest);
  }
}

TEST_CASE("dual coordinate descent is deterministic: the same rows give the same weights bit for bit") {
  const Labelled d = overlapping_clouds(500, 30, 13);
  const SvmSettings s = balanced_settings(d.y, 0.1);
  auto a = train_linear_svm(d.x, d.y, s);
  auto b = train_linear_svm(d.x, d.y, s);
  REQUIRE(a.ok());
  REQUIRE(b.ok());
  CHECK(a->weights == b->weights);
  CHECK(a->bias == b->bias);
}

TEST_CASE("dual coordinate descent refuses a single class") {
  const Labelled d = overlapping_clouds(20, 3, 14);
  const std::vector<int> camera_only(d.y.size(), 0);
  auto m = train_linear_svm(d.x, camera_only, balanced_settings(camera_only, 1.0));
  REQUIRE_FALSE(m.ok());
  CHECK(m.error().message.find("both camera and generated") != std::string::npos);
}

TEST_CASE("training: the cross-validation folds on two threads give the model of one thread, bit for bit") {
  // Simulated cached vectors (this test's own): 120 images, one in three generated, three window
  // vectors each, window-level learning over the default C grid.
  const auto items = test::simulated_items(120, 21, 5, 0.5, 3);
  const AuditReport audit = audit_dataset(items, 0);
  TrainSettings settings;
  settings.augment = Augment::kNone;
  settings.window_instances = true;
  settings.jobs = 1;
  auto one = train_model(items, settings, audit);
  settings.jobs = 2;
  auto two = train_model(items, settings, audit);
  REQUIRE(one.ok());
  REQUIRE(two.ok());
  CHECK(one->cv.margins == two->cv.margins);
  CHECK(one->cv.chosen_c == two->cv.chosen_c);
  CHECK(one->model.linear.weights == two->model.linear.weights);
  CHECK(one->model.linear.bias == two->model.linear.bias);
  CHECK(one->cv.report.overall.roc_auc > 0.9);  // the clouds are separable enough to learn
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
