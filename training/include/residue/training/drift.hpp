// Drift: has what flows through the queue moved away from what the model was trained on?
//
// A model file keeps a training reference: for the score margin and, per feature family, for the
// family's margin contribution (sum of w_j z_j) and its distance (root-mean-square of the
// standardised features z_j, in training standard deviations), the training deciles as bin edges
// and each class's share of training images in each bin; plus each class's share of images in each
// band. A batch of scan records is compared with the mixture of the two classes at a deployment
// base rate, so a queue that simply holds fewer generated images than the training set does not
// look like drift by itself.
//
// Population stability index (PSI) between expected shares e_i and actual shares a_i:
//   PSI = sum_i (a_i - e_i) ln(a_i / e_i),
// the symmetrised Kullback-Leibler divergence of the two binned distributions. Empty bins are
// floored at 1e-4 before the sum (common practice). Reading PSI: < 0.1 no material change,
// 0.1-0.25 a moderate change worth watching, > 0.25 a major change. These cut-offs are common
// practice in credit-scorecard and model monitoring (e.g. Siddiqi 2006, "Credit Risk Scorecards";
// quoted from memory), a rule of thumb rather than a statistical test. Small samples alone produce
// PSI above those cut-offs: for a batch of n images drawn exactly like a reference of m images,
// n_eff PSI with n_eff = 1 / (1/n + 1/m) is approximately chi-square with (bins - 1) degrees of
// freedom (PSI is close to the two-sample chi-square divergence for small differences). So a row
// is read as moderate or major only when its PSI also exceeds that distribution's 99th percentile
// divided by n_eff (`psi_noise_floor`); batches under `kMinimumImages` are never flagged.
#pragma once

#include <map>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

namespace residue {

inline constexpr double kPsiFloor = 1e-4;
inline constexpr double kPsiModerate = 0.10;
inline constexpr double kPsiMajor = 0.25;
inline constexpr size_t kMinimumImages = 100;

// Bins with edges at a reference sample's deciles: value v falls in bin i = number of edges <= v,
// so there are edges.size() + 1 bins. Tied deciles are merged (fewer bins).
std::vector<double> decile_edges(std::vector<double> values);
// Share of `values` in each bin of `edges` (sums to 1; all zero for no values).
std::vector<double> bin_shares(const std::vector<double>& edges, const std::vector<double>& values);
// PSI of actual shares against expected shares (same bins), floors applied to both.
double population_stability_index(const std::vector<double>& expected, const std::vector<double>& actual);
// "stable", "moderate" or "major" by the cut-offs above.
std::string psi_reading(double psi);
// 99th percentile of the chi-square distribution with `dof` degrees of freedom (1 to 20; from the
// standard table, checked against scipy.stats.chi2.ppf in the tests).
double chi_square_99(int dof);
// The PSI that sampling alone exceeds 1 % of the time, for `bins` bins, a batch of `batch` images
// and a reference of `reference` images.
double psi_noise_floor(size_t bins, size_t batch, size_t reference);

// One summary's training histogram, per class.
struct ReferenceHistogram {
  std::vector<double> edges;
  std::vector<double> camera;     // shares of training camera images per bin
  std::vector<double> generated;  // shares of training generated images per bin
  // Expected shares when generated images make up `prior` of the batch.
  [[nodiscard]] std::vector<double> expected(double prior) const;
};

// Values of one summary for the training images, labels 1 = generated.
ReferenceHistogram reference_histogram(const std::vector<double>& values, const std::vector<int>& labels);

struct TrainingReference {
  size_t images = 0;
  ReferenceHistogram margin;  // out-of-fold margins (how unseen images like the training set score)
  std::map<std::string, ReferenceHistogram> contribution;  // per family
  std::map<std::string, ReferenceHistogram> distance;      // per family
  // Share of each class in each band at the model's thresholds (out of fold).
  std::map<std::string, double> camera_bands;
  std::map<std::string, double> generated_bands;
};

nlohmann::ordered_json reference_to_json(const TrainingReference& r);
std::optional<TrainingReference> reference_from_json(const nlohmann::json& j);

// What drift needs from one scored image (a scan record).
struct ScoredImage {
  double margin = 0.0;
  std::string band;  // at the model's own thresholds, no prior shift
  std::map<std::string, double> contribution;
  std::map<std::string, double> distance;
  bool declared_generated = false;
};

struct DriftRow {
  std::string summary;  // "score" or "<family> contribution" / "<family> distance"
  std::string family;   // empty for the score
  double psi = 0.0;
  double noise_floor = 0.0;  // psi_noise_floor for this row
  std::string reading;       // psi_reading, "stable" when psi <= noise_floor, "no data" without values,
                             // "not judged" in a batch under kMinimumImages
  std::vector<double> expected, actual;
};

struct DriftReport {
  size_t images = 0;
  double prior = 0.5;  // deployment base rate used for the expected shares
  std::vector<DriftRow> rows;
  double inconclusive_expected = 0.0, inconclusive_actual = 0.0;
  size_t declared_generated = 0, declared_generated_missed = 0;
  double declared_miss_expected = 0.0;  // share of training generated images not likely-generated
  bool too_few = false;
  std::string verdict;                // "stable", "watch" or "retrain"
  std::vector<std::string> findings;  // plain sentences, most serious first
};

DriftReport assess_drift(const TrainingReference& reference, const std::vector<ScoredImage>& batch,
                         double prior);

nlohmann::ordered_json drift_to_json(const DriftReport& r);
std::string drift_to_text(const DriftReport& r);

}  // namespace residue
