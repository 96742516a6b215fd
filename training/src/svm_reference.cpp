// libsvm adapter (the only file that includes svm.h): the reference solver the tests compare the
// liblinear solver against.
#include <svm.h>

#include <memory>

#include "residue/training/linear.hpp"

namespace residue {

Result<LinearModel> train_linear_svm_libsvm(const Matrix& x, const std::vector<int>& labels,
                                            const SvmSettings& settings) {
  if (auto missing = missing_class(labels)) return *missing;
  // Dense rows as libsvm nodes: index 1..d, then the terminator -1.
  std::vector<svm_node> nodes(x.rows * (x.cols + 1));
  std::vector<svm_node*> rows(x.rows);
  std::vector<double> y(x.rows);
  for (size_t i = 0; i < x.rows; ++i) {
    svm_node* r = nodes.data() + i * (x.cols + 1);
    for (size_t j = 0; j < x.cols; ++j) r[j] = {static_cast<int>(j + 1), x.row(i)[j]};
    r[x.cols] = {-1, 0.0};
    rows[i] = r;
    y[i] = labels[i] != 0 ? 1.0 : 0.0;
  }
  svm_problem problem{static_cast<int>(x.rows), y.data(), rows.data()};
  int weight_labels[2] = {1, 0};
  double weights[2] = {settings.weight_generated, settings.weight_camera};
  svm_parameter param{};
  param.svm_type = C_SVC;
  param.kernel_type = LINEAR;
  param.C = settings.c;
  param.eps = settings.tolerance;
  param.cache_size = 1024;  // MB of kernel rows: 10k samples fit whole (float rows)
  param.shrinking = 1;
  param.probability = 0;
  param.nr_weight = 2;
  param.weight_label = weight_labels;
  param.weight = weights;
  if (const char* problem_text = svm_check_parameter(&problem, &param)) {
    return make_error(ErrorCode::kInternal, std::string("libsvm: ") + problem_text);
  }
  svm_set_print_string_function([](const char*) {});
  std::unique_ptr<svm_model, void (*)(svm_model*)> model(
      svm_train(&problem, &param), [](svm_model* m) { svm_free_and_destroy_model(&m); });
  // w = sum_i coef_i x_i over the support vectors; decision = w . x - rho, positive towards
  // model->label[0] (the first label libsvm met in the data).
  LinearModel out;
  out.weights.assign(x.cols, 0.0);
  for (int i = 0; i < model->l; ++i) {
    const double coef = model->sv_coef[0][i];
    for (const svm_node* n = model->SV[i]; n->index != -1; ++n) out.weights[n->index - 1] += coef * n->value;
  }
  out.bias = -model->rho[0];
  if (model->label[0] != 1) {
    for (double& w : out.weights) w = -w;
    out.bias = -out.bias;
  }
  return out;
}

}  // namespace residue
