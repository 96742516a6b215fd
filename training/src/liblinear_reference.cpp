// liblinear adapter (the only file that includes linear.h): the reference the tests compare our
// dual coordinate descent against (the same method on liblinear's sparse rows).
#include <linear.h>

#include <memory>

#include "residue/training/linear.hpp"

namespace residue {

Result<LinearModel> train_linear_svm_liblinear(const Matrix& x, const std::vector<int>& labels,
                                               const SvmSettings& settings) {
  if (auto missing = missing_class(labels)) return *missing;
  // Dense rows as liblinear nodes: index 1..d, the bias node d+1 (liblinear appends the constant
  // `bias` as one more feature), then the terminator -1.
  const size_t stride = x.cols + 2;
  std::vector<feature_node> nodes(x.rows * stride);
  std::vector<feature_node*> rows(x.rows);
  std::vector<double> y(x.rows);
  for (size_t i = 0; i < x.rows; ++i) {
    feature_node* r = nodes.data() + i * stride;
    for (size_t j = 0; j < x.cols; ++j) r[j] = {static_cast<int>(j + 1), x.row(i)[j]};
    r[x.cols] = {static_cast<int>(x.cols + 1), settings.bias_scale};
    r[x.cols + 1] = {-1, 0.0};
    rows[i] = r;
    y[i] = labels[i] != 0 ? 1.0 : -1.0;
  }
  problem prob{};
  prob.l = static_cast<int>(x.rows);
  prob.n = static_cast<int>(x.cols + 1);
  prob.y = y.data();
  prob.x = rows.data();
  prob.bias = settings.bias_scale;
  int weight_labels[2] = {1, -1};
  double weights[2] = {settings.weight_generated, settings.weight_camera};
  parameter param{};
  param.solver_type = L2R_L1LOSS_SVC_DUAL;  // hinge loss: the same primal as libsvm's C-SVC
  param.C = settings.c;
  param.eps = settings.tolerance;
  param.nr_weight = 2;
  param.weight_label = weight_labels;
  param.weight = weights;
  if (const char* problem_text = check_parameter(&prob, &param)) {
    return make_error(ErrorCode::kInternal, std::string("liblinear: ") + problem_text);
  }
  set_print_string_function([](const char*) {});
  std::unique_ptr<model, void (*)(model*)> fitted(train(&prob, &param),
                                                  [](model* m) { free_and_destroy_model(&m); });
  // Two classes: w has one column, positive towards label[0] (the first label liblinear met).
  LinearModel out;
  out.weights.assign(fitted->w, fitted->w + x.cols);
  out.bias = fitted->w[x.cols] * settings.bias_scale;
  if (fitted->label[0] != 1) {
    for (double& w : out.weights) w = -w;
    out.bias = -out.bias;
  }
  return out;
}

}  // namespace residue
