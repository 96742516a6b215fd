#include "residue/training/applicability.hpp"

#include <Eigen/Dense>
#include <algorithm>
#include <boost/math/special_functions/beta.hpp>
#include <cmath>
#include <cstdio>
#include <exception>
#include <set>

#include "residue/training/batch.hpp"

namespace residue {

namespace {

std::string fixed(double v, int digits) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.*f", digits, v);
  return buf;
}

// Linear-interpolation quantile of sorted values (numpy.quantile's default, "linear").
double quantile_sorted(const std::vector<double>& sorted, double q) {
  if (sorted.empty()) return 0.0;
  const double pos = q * static_cast<double>(sorted.size() - 1);
  const auto lo = static_cast<size_t>(std::floor(pos));
  const size_t hi = std::min(lo + 1, sorted.size() - 1);
  return sorted[lo] + (pos - static_cast<double>(lo)) * (sorted[hi] - sorted[lo]);
}

size_t support_at_or_below(const std::map<int, size_t>& histogram, int value) {
  size_t n = 0;
  for (const auto& [v, count] : histogram) n += v <= value ? count : 0;
  return n;
}

size_t support_near(const std::map<int, size_t>& histogram, int bin, int radius) {
  size_t n = 0;
  for (const auto& [b, count] : histogram) n += std::abs(b - bin) <= radius ? count : 0;
  return n;
}

// A histogram keyed by integers, as a JSON object keyed by their decimal text.
nlohmann::ordered_json histogram_to_json(const std::map<int, size_t>& histogram) {
  nlohmann::ordered_json j = nlohmann::ordered_json::object();
  for (const auto& [key, n] : histogram) j[std::to_string(key)] = n;
  return j;
}

std::map<int, size_t> histogram_from_json(const nlohmann::json& j) {
  std::map<int, size_t> histogram;
  for (const auto& [key, n] : j.items()) histogram[std::stoi(key)] = n.get<size_t>();
  return histogram;
}

nlohmann::ordered_json fine_detail_to_json(const std::map<int, std::map<int, size_t>>& by_fidelity) {
  nlohmann::ordered_json j = nlohmann::ordered_json::object();
  for (const auto& [fidelity, histogram] : by_fidelity)
    j[std::to_string(fidelity)] = histogram_to_json(histogram);
  return j;
}

nlohmann::ordered_json counts_to_json(const ProcessingCounts& c) {
  return {{"images", c.images},
          {"quantised", c.quantised},
          {"lossy_webp", c.lossy_webp},
          {"screenshot_like", c.screenshot_like},
          {"double_jpeg", c.double_jpeg},
          {"jpeg_quality", histogram_to_json(c.jpeg_quality)},
          {"resampling_bin_256", histogram_to_json(c.resampling_bin)},
          {"fine_detail_log10_centi", fine_detail_to_json(c.fine_detail)}};
}

ProcessingCounts counts_from_json(const nlohmann::json& j) {
  ProcessingCounts c;
  c.images = j.at("images");
  c.quantised = j.at("quantised");
  c.lossy_webp = j.at("lossy_webp");
  c.screenshot_like = j.at("screenshot_like");
  c.double_jpeg = j.at("double_jpeg");
  c.jpeg_quality = histogram_from_json(j.at("jpeg_quality"));
  c.resampling_bin = histogram_from_json(j.at("resampling_bin_256"));
  // Absent in models trained before the fine-detail guard: no floor, no guard.
  if (j.contains("fine_detail_log10_centi")) {
    for (const auto& [fidelity, histogram] : j.at("fine_detail_log10_centi").items())
      c.fine_detail[std::stoi(fidelity)] = histogram_from_json(histogram);
  }
  return c;
}

}  // namespace

nlohmann::ordered_json processing_to_json(const ProcessingEvidence& e) {
  return {
      {"version", kProcessingVersion},
      {"quantised", e.quantised},
      {"palette_file", e.palette_file},
      {"distinct_colours", e.distinct_colours},
      {"histogram_gaps", e.histogram_gaps},
      {"resampled", e.resampling.detected},
      {"resampling",
       {{"frequency", e.resampling.frequency},
        {"strength", e.resampling.strength},
        {"windows_agreeing", e.resampling.windows_agreeing},
        {"windows", e.resampling.windows},
        {"factor_candidates", e.resampling.detected ? resampling_factor_candidates(e.resampling.frequency)
                                                    : std::vector<double>{}}}},
      {"jpeg_quality", e.jpeg_quality ? nlohmann::ordered_json(*e.jpeg_quality) : nlohmann::ordered_json()},
      {"double_jpeg", e.double_jpeg.detected},
      {"double_jpeg_strength", e.double_jpeg.strength},
      {"lossy_webp", e.lossy_webp},
      {"flat_share", e.flat_share},
      {"screenshot_like", e.screenshot_like},
      {"decoder_warnings", decoder_warnings_to_json(e.decoder_warnings)},
      {"damaged", e.damaged},
      {"fine_detail", e.fine_detail},
      {"notes", e.notes}};
}

nlohmann::ordered_json decoder_warnings_to_json(const std::vector<DecoderWarning>& warnings) {
  nlohmann::ordered_json out = nlohmann::ordered_json::array();
  for (const auto& w : warnings) out.push_back({{"kind", w.kind}, {"message", w.message}});
  return out;
}

ProcessingEvidence processing_from_json(const nlohmann::json& j) {
  if (j.at("version") != kProcessingVersion) {
    throw nlohmann::json::other_error::create(502, "processing evidence of another version", nullptr);
  }
  ProcessingEvidence e;
  e.quantised = j.at("quantised");
  e.palette_file = j.at("palette_file");
  e.distinct_colours = j.at("distinct_colours");
  e.histogram_gaps = j.at("histogram_gaps");
  e.resampling.detected = j.at("resampled");
  const auto& r = j.at("resampling");
  e.resampling.frequency = r.at("frequency");
  e.resampling.strength = r.at("strength");
  e.resampling.windows_agreeing = r.at("windows_agreeing");
  e.resampling.windows = r.at("windows");
  if (!j.at("jpeg_quality").is_null()) e.jpeg_quality = j.at("jpeg_quality").get<int>();
  e.double_jpeg.detected = j.at("double_jpeg");
  e.double_jpeg.strength = j.at("double_jpeg_strength");
  e.lossy_webp = j.at("lossy_webp");
  e.flat_share = j.at("flat_share");
  e.screenshot_like = j.at("screenshot_like");
  for (const auto& w : j.at("decoder_warnings")) {
    e.decoder_warnings.push_back({w.at("kind").get<std::string>(), w.at("message").get<std::string>()});
  }
  e.damaged = j.at("damaged");
  e.fine_detail = j.at("fine_detail");
  e.notes = j.at("notes").get<std::vector<std::string>>();
  return e;
}

double clopper_pearson_upper(size_t k, size_t n, double confidence) {
  if (n == 0 || k >= n) return 1.0;
  return boost::math::ibeta_inv(static_cast<double>(k + 1), static_cast<double>(n - k), confidence);
}

size_t trials_needed(double target, double confidence) {
  return static_cast<size_t>(std::ceil(std::log(1.0 - confidence) / std::log(1.0 - target) - 1e-9));
}

std::pair<double, FprPromise> promised_threshold(const std::vector<double>& p, const std::vector<int>& labels,
                                                 const std::vector<int>& groups, double target,
                                                 double confidence, const std::vector<bool>& guarded) {
  // Every camera image and group is in the denominators; only unguarded ones can be flagged.
  std::vector<size_t> camera;
  std::set<int> camera_groups;
  size_t camera_images = 0;
  for (size_t i = 0; i < p.size(); ++i) {
    if (labels[i] == 0) {
      ++camera_images;
      camera_groups.insert(groups[i]);
      if (guarded.empty() || !guarded[i]) camera.push_back(i);
    }
  }
  std::sort(camera.begin(), camera.end(), [&](size_t a, size_t b) { return p[a] > p[b]; });
  FprPromise promise;
  promise.confidence = confidence;
  promise.camera_images = camera_images;
  promise.camera_groups = camera_groups.size();
  auto bound = [&](size_t k_images, size_t k_groups) {
    return std::max(clopper_pearson_upper(k_images, promise.camera_images, confidence),
                    clopper_pearson_upper(k_groups, promise.camera_groups, confidence));
  };
  double threshold = camera.empty() ? 0.5 : std::nextafter(p[camera.front()], 2.0);
  promise.bound = bound(0, 0);
  promise.met = promise.bound <= target;
  std::set<int> flagged;
  for (size_t j = 0; j < camera.size() && promise.met; ++j) {
    flagged.insert(groups[camera[j]]);
    // Ties: every camera image with the same score is flagged together.
    if (j + 1 < camera.size() && p[camera[j + 1]] == p[camera[j]]) continue;
    const double b = bound(j + 1, flagged.size());
    if (b > target) break;
    threshold = p[camera[j]];
    promise.bound = b;
    promise.false_positive_images = j + 1;
    promise.false_positive_groups = flagged.size();
  }
  const size_t needed = trials_needed(target, confidence);
  promise.groups_needed = promise.met || needed <= promise.camera_groups ? 0 : needed - promise.camera_groups;
  return {threshold, promise};
}

namespace {

// The PPCA distance from a row's centred values c and their projections p on the basis.
double ppca_distance(const FamilyReference& r, double centred_norm, const double* p) {
  double explained = 0.0, whitened = 0.0;
  for (size_t i = 0; i < r.variances.size(); ++i) {
    explained += p[i] * p[i];
    whitened += p[i] * p[i] / r.variances[i];
  }
  const double residual = std::max(0.0, centred_norm - explained);
  return std::sqrt((whitened + residual / r.residual_variance) / static_cast<double>(r.columns.size()));
}

using RowMajor = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;

// Rows `rows` of z, values `columns`, minus `mean` (none when empty).
RowMajor gather(const Matrix& z, const std::vector<size_t>& columns, const std::vector<size_t>& rows,
                const std::vector<double>& mean) {
  RowMajor x(static_cast<Eigen::Index>(rows.size()), static_cast<Eigen::Index>(columns.size()));
  for (size_t i = 0; i < rows.size(); ++i) {
    const double* r = z.row(rows[i]);
    double* out = x.row(static_cast<Eigen::Index>(i)).data();
    for (size_t j = 0; j < columns.size(); ++j) out[j] = r[columns[j]] - (mean.empty() ? 0.0 : mean[j]);
  }
  return x;
}

}  // namespace

double FamilyReference::distance(const double* z) const {
  const size_t d = columns.size();
  std::vector<double> c(d);
  double norm = 0.0;
  for (size_t j = 0; j < d; ++j) {
    c[j] = z[columns[j]] - mean[j];
    norm += c[j] * c[j];
  }
  std::vector<double> p(variances.size());
  for (size_t i = 0; i < variances.size(); ++i) {
    for (size_t j = 0; j < d; ++j) p[i] += basis[i * d + j] * c[j];
  }
  return ppca_distance(*this, norm, p.data());
}

std::vector<double> FamilyReference::distances(const Matrix& z, const std::vector<size_t>& rows) const {
  const auto k = static_cast<Eigen::Index>(variances.size());
  const auto d = static_cast<Eigen::Index>(columns.size());
  const RowMajor c = gather(z, columns, rows, mean);
  const RowMajor p = c * Eigen::Map<const RowMajor>(basis.data(), k, d).transpose();
  std::vector<double> out(rows.size());
  for (size_t i = 0; i < rows.size(); ++i) {
    const auto row = static_cast<Eigen::Index>(i);
    out[i] = ppca_distance(*this, c.row(row).squaredNorm(), p.row(row).data());
  }
  return out;
}

FamilyMoments FamilyMoments::of(const Matrix& z, const std::vector<size_t>& columns,
                                const std::vector<size_t>& rows) {
  FamilyMoments m;
  const auto d = static_cast<Eigen::Index>(columns.size());
  m.count = rows.size();
  m.mean.assign(columns.size(), 0.0);
  m.scatter.assign(columns.size() * columns.size(), 0.0);
  if (rows.empty()) return m;
  RowMajor x = gather(z, columns, rows, {});
  const Eigen::RowVectorXd mu = x.colwise().mean();
  x.rowwise() -= mu;
  // The lower triangle by a rank update (half the products of x'x), then mirrored.
  Eigen::MatrixXd s = Eigen::MatrixXd::Zero(d, d);
  s.selfadjointView<Eigen::Lower>().rankUpdate(x.transpose());
  s.triangularView<Eigen::StrictlyUpper>() = s.transpose();
  std::copy_n(mu.data(), d, m.mean.begin());
  Eigen::Map<Eigen::MatrixXd>(m.scatter.data(), d, d) = s;  // symmetric: either order
  return m;
}

FamilyMoments& FamilyMoments::operator+=(const FamilyMoments& other) {
  if (other.count == 0) return *this;
  if (count == 0) {
    *this = other;
    return *this;
  }
  // Chan, Golub & LeVeque (1979): with delta = mean_b - mean_a and n = n_a + n_b,
  // mean = mean_a + delta n_b / n and M = M_a + M_b + delta delta' n_a n_b / n.
  const auto na = static_cast<double>(count);
  const auto nb = static_cast<double>(other.count);
  const double n = na + nb;
  const size_t d = mean.size();
  std::vector<double> delta(d);
  for (size_t j = 0; j < d; ++j) delta[j] = other.mean[j] - mean[j];
  for (size_t a = 0; a < d; ++a) {
    for (size_t b = 0; b < d; ++b)
      scatter[a * d + b] += other.scatter[a * d + b] + delta[a] * delta[b] * na * nb / n;
  }
  for (size_t j = 0; j < d; ++j) mean[j] += delta[j] * nb / n;
  count += other.count;
  return *this;
}

FamilyReference fit_family_reference(const std::string& family, const std::vector<size_t>& columns,
                                     const Matrix& z, double explained) {
  std::vector<size_t> rows(z.rows);
  for (size_t i = 0; i < rows.size(); ++i) rows[i] = i;
  return fit_family_reference(family, columns, FamilyMoments::of(z, columns, rows), explained);
}

FamilyReference fit_family_reference(const std::string& family, const std::vector<size_t>& columns,
                                     const FamilyMoments& moments, double explained) {
  FamilyReference r;
  r.family = family;
  r.columns = columns;
  const auto d = static_cast<Eigen::Index>(columns.size());
  const auto n = static_cast<Eigen::Index>(moments.count);
  const Eigen::MatrixXd covariance = Eigen::Map<const Eigen::MatrixXd>(moments.scatter.data(), d, d) /
                                     std::max<double>(1.0, static_cast<double>(n - 1));
  const Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eig(covariance);
  // Eigen sorts ascending; we want descending.
  std::vector<double> values(eig.eigenvalues().data(), eig.eigenvalues().data() + d);
  std::reverse(values.begin(), values.end());
  for (double& v : values) v = std::max(v, 0.0);
  double total = 0.0;
  for (double v : values) total += v;
  const double floor = std::max(1e-3 * total / static_cast<double>(std::max<Eigen::Index>(d, 1)), 1e-12);
  size_t k = 0;
  double cumulative = 0.0;
  const size_t k_max = static_cast<size_t>(std::max<Eigen::Index>(1, std::min(d - 1, n - 2)));
  while (k < k_max && cumulative < explained * total) cumulative += values[k++];
  k = std::max<size_t>(k, 1);
  r.mean = moments.mean;
  for (size_t i = 0; i < k; ++i) {
    r.variances.push_back(std::max(values[i], floor));
    const auto col = eig.eigenvectors().col(d - 1 - static_cast<Eigen::Index>(i));
    for (Eigen::Index j = 0; j < d; ++j) r.basis.push_back(col(j));
  }
  double rest = 0.0;
  for (size_t i = k; i < values.size(); ++i) rest += values[i];
  r.residual_variance =
      values.size() > k ? std::max(rest / static_cast<double>(values.size() - k), floor) : floor;
  return r;
}

FamilyFits fit_families_out_of_fold(const Matrix& z, const std::vector<std::string>& families,
                                    const std::vector<std::vector<size_t>>& fit_rows,
                                    const std::vector<std::vector<size_t>>& score_rows, int jobs) {
  std::map<std::string, std::vector<size_t>> columns;
  for (size_t c = 0; c < families.size(); ++c) columns[families[c]].push_back(c);
  const std::vector<std::pair<std::string, std::vector<size_t>>> list(columns.begin(), columns.end());
  FamilyFits out;
  out.references.resize(list.size());
  out.out_of_fold.assign(list.size(), std::vector<double>(z.rows, 0.0));
  auto fit_family = [&](size_t k) {
    const auto& [family, cols] = list[k];
    std::vector<FamilyMoments> moments;
    moments.reserve(fit_rows.size());
    for (const auto& rows : fit_rows) moments.push_back(FamilyMoments::of(z, cols, rows));
    FamilyMoments every;
    for (const auto& m : moments) every += m;
    for (size_t f = 0; f < fit_rows.size(); ++f) {
      if (score_rows[f].empty() || every.count - moments[f].count < 3) continue;
      FamilyMoments train;
      for (size_t g = 0; g < moments.size(); ++g) {
        if (g != f) train += moments[g];
      }
      const auto d = fit_family_reference(family, cols, train).distances(z, score_rows[f]);
      for (size_t r = 0; r < d.size(); ++r) out.out_of_fold[k][score_rows[f][r]] = d[r];
    }
    out.references[k] = fit_family_reference(family, cols, every);
  };
  std::exception_ptr failure;
  ordered_parallel<std::exception_ptr>(
      list.size(), jobs,
      [&](size_t k) -> std::exception_ptr {
        try {
          fit_family(k);
          return nullptr;
        } catch (...) {
          return std::current_exception();
        }
      },
      [&](size_t, std::exception_ptr& e) {
        if (e && !failure) failure = e;
      });
  if (failure) std::rethrow_exception(failure);
  return out;
}

std::vector<double> joint_limits(const std::vector<std::vector<double>>& distances, double coverage) {
  std::vector<std::vector<double>> sorted = distances;
  for (auto& s : sorted) std::sort(s.begin(), s.end());
  const size_t n = distances.empty() ? 0 : distances.front().size();
  auto limits_at = [&](double q) {
    std::vector<double> t;
    t.reserve(sorted.size());
    for (const auto& s : sorted) t.push_back(quantile_sorted(s, q));
    return t;
  };
  auto pass_share = [&](const std::vector<double>& t) {
    size_t pass = 0;
    for (size_t i = 0; i < n; ++i) {
      bool ok = true;
      for (size_t f = 0; f < distances.size() && ok; ++f) ok = distances[f][i] <= t[f];
      pass += ok ? 1 : 0;
    }
    return n > 0 ? static_cast<double>(pass) / static_cast<double>(n) : 1.0;
  };
  double lo = coverage, hi = 1.0;
  if (pass_share(limits_at(lo)) >= coverage) return limits_at(lo);
  for (int it = 0; it < 50; ++it) {
    const double mid = 0.5 * (lo + hi);
    (pass_share(limits_at(mid)) >= coverage ? hi : lo) = mid;
  }
  return limits_at(hi);
}

int compression_fidelity(const ProcessingEvidence& e) {
  if (e.lossy_webp) return 0;
  if (e.jpeg_quality) return *e.jpeg_quality < 75 ? 0 : *e.jpeg_quality < 90 ? 1 : 2;
  return 3;
}

namespace {
constexpr double kLeastFineDetail = 1e-3;
int fine_detail_bin(double detail) {
  return static_cast<int>(std::floor(100.0 * std::log10(std::max(detail, kLeastFineDetail))));
}
}  // namespace

void add_fine_detail(ProcessingCounts& c, const ProcessingEvidence& e) {
  c.fine_detail[compression_fidelity(e)][fine_detail_bin(e.fine_detail)] += 1;
}

std::optional<double> fine_detail_floor(const ProcessingCounts& camera, int fidelity, double share,
                                        size_t min_support) {
  // Compression only removes fine detail, so camera photos compressed as strongly or more are a
  // reference that errs towards judging (a lower floor).
  std::map<int, size_t> pooled;
  size_t n = 0;
  for (const auto& [f, histogram] : camera.fine_detail) {
    if (f > fidelity) continue;
    for (const auto& [bin, count] : histogram) {
      pooled[bin] += count;
      n += count;
    }
  }
  if (n < min_support || n == 0) return std::nullopt;
  const auto allowed = static_cast<size_t>(std::floor(share * static_cast<double>(n)));
  size_t below = 0;
  for (const auto& [bin, count] : pooled) {
    if (below + count > allowed) return std::pow(10.0, bin / 100.0);
    below += count;
  }
  return std::nullopt;
}

ProcessingCounts& operator+=(ProcessingCounts& c, const ProcessingEvidence& e) {
  c.images += 1;
  c.quantised += e.quantised ? 1 : 0;
  c.lossy_webp += e.lossy_webp ? 1 : 0;
  c.screenshot_like += e.screenshot_like ? 1 : 0;
  c.double_jpeg += e.double_jpeg.detected ? 1 : 0;
  if (e.jpeg_quality) c.jpeg_quality[*e.jpeg_quality] += 1;
  if (e.resampling.detected)
    c.resampling_bin[static_cast<int>(std::lround(256 * e.resampling.frequency))] += 1;
  add_fine_detail(c, e);
  return c;
}

DomainCheck check_domain(const Applicability& a, const std::vector<double>& z, const ProcessingEvidence* p) {
  DomainCheck out;
  for (const auto& f : a.families) {
    const double d = f.distance(z.data());
    out.distance[f.family] = d;
    out.limit[f.family] = f.limit;
    if (!(d <= f.limit)) out.families_out.push_back(f.family);
  }
  out.in_domain = out.families_out.empty();
  if (!out.in_domain) {
    std::string names;
    for (const auto& f : out.families_out) {
      names += (names.empty() ? "" : ", ") + f + " " + fixed(out.distance[f], 2) + " (limit " +
               fixed(out.limit[f], 2) + ")";
    }
    out.reasons.push_back("unlike the training images: its " + names +
                          " traces lie outside what 99 % of them showed");
  }
  if (p == nullptr) return out;
  // A damaged file first: whatever else is said, its pixels are not the ones that were written.
  for (const auto& w : p->decoder_warnings) {
    if (w.kind == "damaged") {
      out.reasons.insert(out.reasons.begin(), "the file is damaged: " + w.message);
      break;
    }
  }
  const size_t need = a.min_support;
  const auto& cam = a.camera;
  auto seen = [&](size_t k) {
    return " (the training data held " + std::to_string(k) + " such camera photos; " + std::to_string(need) +
           " are needed to judge it)";
  };
  if (p->quantised && cam.quantised < need) {
    out.reasons.push_back("palette or few-colour image" + seen(cam.quantised));
  }
  if (p->lossy_webp && cam.lossy_webp < need) out.reasons.push_back("lossy WebP" + seen(cam.lossy_webp));
  if (p->jpeg_quality) {
    const size_t k = support_at_or_below(cam.jpeg_quality, *p->jpeg_quality + 5);
    if (k < need) {
      out.reasons.push_back("JPEG quality about " + std::to_string(*p->jpeg_quality) +
                            ", stronger compression than the training's camera photos showed" + seen(k));
    }
  }
  if (p->resampling.detected) {
    const int bin = static_cast<int>(std::lround(256 * p->resampling.frequency));
    const size_t k = support_near(cam.resampling_bin, bin, 2);
    if (k < need) {
      const auto f = resampling_factor_candidates(p->resampling.frequency);
      out.reasons.push_back("resampled (scaled by about " + fixed(f[0], 2) + ", " + fixed(f[2], 2) + " or " +
                            fixed(f[1], 2) + ") in a way the training's camera photos were not" + seen(k));
    }
  }
  if (p->screenshot_like && cam.screenshot_like < need) {
    out.reasons.push_back("screenshot or graphics-like flat colour areas" + seen(cam.screenshot_like));
  }
  const int fidelity = compression_fidelity(*p);
  const auto floor = fine_detail_floor(cam, fidelity, a.fine_detail_share, need);
  // Values under 0.001 share the lowest bin (fine_detail_bin): a flat image is not below a floor
  // that flat camera photos set.
  if (floor && std::max(p->fine_detail, kLeastFineDetail) < *floor) {
    const std::string by = fidelity == 0 && p->jpeg_quality ? "heavily recompressed (JPEG quality about " +
                                                                  std::to_string(*p->jpeg_quality) + ")"
                           : fidelity == 0 ? "heavily compressed (lossy WebP) or blurred"
                                           : "blurred or denoised";
    out.reasons.push_back(
        "too little fine detail left to judge (blurred, denoised or heavily recompressed): " +
        fixed(p->fine_detail, 2) + " grey levels, below " + fixed(100.0 * (1.0 - a.fine_detail_share), 0) +
        " % of the training's camera photos at this compression or stronger (" + fixed(*floor, 2) +
        "); the traces look weakened, most likely " + by);
  }
  return out;
}

nlohmann::ordered_json family_reference_to_json(const FamilyReference& f) {
  return {{"family", f.family}, {"columns", f.columns},     {"mean", f.mean},
          {"basis", f.basis},   {"variances", f.variances}, {"residual_variance", f.residual_variance},
          {"limit", f.limit}};
}

FamilyReference family_reference_from_json(const nlohmann::json& f) {
  FamilyReference r;
  r.family = f.at("family");
  r.columns = f.at("columns").get<std::vector<size_t>>();
  r.mean = f.at("mean").get<std::vector<double>>();
  r.basis = f.at("basis").get<std::vector<double>>();
  r.variances = f.at("variances").get<std::vector<double>>();
  r.residual_variance = f.at("residual_variance");
  r.limit = f.at("limit");
  const size_t d = r.columns.size();
  if (r.mean.size() != d || r.basis.size() != r.variances.size() * d || r.variances.empty() ||
      !(r.residual_variance > 0)) {
    throw nlohmann::json::other_error::create(501, "PPCA reference of " + r.family + " is inconsistent",
                                              nullptr);
  }
  for (double v : r.variances) {
    if (!(v > 0)) throw nlohmann::json::other_error::create(501, "non-positive variance", nullptr);
  }
  return r;
}

nlohmann::ordered_json applicability_to_json(const Applicability& a) {
  nlohmann::ordered_json families = nlohmann::ordered_json::array();
  for (const auto& f : a.families) families.push_back(family_reference_to_json(f));
  return {{"method", "ppca-tipping-bishop-1999"},
          {"coverage", a.coverage},
          {"families", families},
          {"min_support", a.min_support},
          {"fine_detail_share", a.fine_detail_share},
          {"processing_version", kProcessingVersion},
          {"processing", {{"camera", counts_to_json(a.camera)}, {"generated", counts_to_json(a.generated)}}}};
}

Applicability applicability_from_json(const nlohmann::json& j) {
  Applicability a;
  a.coverage = j.at("coverage");
  a.min_support = j.at("min_support");
  a.fine_detail_share = j.value("fine_detail_share", a.fine_detail_share);
  for (const auto& f : j.at("families")) a.families.push_back(family_reference_from_json(f));
  a.camera = counts_from_json(j.at("processing").at("camera"));
  a.generated = counts_from_json(j.at("processing").at("generated"));
  return a;
}

}  // namespace residue
