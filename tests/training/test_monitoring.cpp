// Drift (PSI, deciles, noise floor) and model comparison (bootstrap percentiles, verdicts) against
// numpy and scipy (Debian python3-numpy, python3-scipy) and planted cases; model lineage and settings.
#include <doctest/doctest.h>

#include <fstream>
#include <random>
#include <sstream>

#include "residue/training/comparison.hpp"
#include "residue/training/drift.hpp"
#include "residue/training/trainer.hpp"
#include "support.hpp"

using namespace residue;

namespace {

std::string joined(const std::vector<double>& v) {
  std::ostringstream out;
  out.precision(17);
  for (size_t i = 0; i < v.size(); ++i) out << (i ? "," : "") << v[i];
  return out.str();
}

std::filesystem::path write_values(const std::string& name, const std::vector<double>& v) {
  const auto path = test::scratch() / name;
  std::ofstream out(path);
  out.precision(17);
  for (double x : v) out << x << "\n";
  return path;
}

std::vector<double> normal_sample(std::mt19937_64& rng, size_t n, double mean) {
  std::normal_distribution<double> d(mean, 1.0);
  std::vector<double> v(n);
  for (auto& x : v) x = d(rng);
  return v;
}

// A reference with one "noise" family: camera N(0,1), generated N(3,1) for every summary.
TrainingReference simulated_reference(std::mt19937_64& rng, size_t per_class) {
  std::vector<double> values = normal_sample(rng, per_class, 0.0);
  const auto generated = normal_sample(rng, per_class, 3.0);
  values.insert(values.end(), generated.begin(), generated.end());
  std::vector<int> labels(per_class, 0);
  labels.resize(2 * per_class, 1);
  TrainingReference r;
  r.images = 2 * per_class;
  r.margin = reference_histogram(values, labels);
  r.contribution["noise"] = reference_histogram(values, labels);
  r.distance["noise"] = reference_histogram(values, labels);
  r.camera_bands = {{"likely-camera", 0.9}, {"inconclusive", 0.09}, {"likely-generated", 0.01}};
  r.generated_bands = {{"likely-camera", 0.05}, {"inconclusive", 0.15}, {"likely-generated", 0.8}};
  return r;
}

std::vector<ScoredImage> simulated_batch(std::mt19937_64& rng, size_t camera, size_t generated,
                                         double shift) {
  std::vector<ScoredImage> batch;
  for (size_t i = 0; i < camera + generated; ++i) {
    const double v = normal_sample(rng, 1, (i < camera ? 0.0 : 3.0) + shift)[0];
    ScoredImage s;
    s.margin = v;
    s.band = v > 2.0 ? "likely-generated" : (v < 1.0 ? "likely-camera" : "inconclusive");
    s.contribution["noise"] = v;
    s.distance["noise"] = v;
    batch.push_back(s);
  }
  return batch;
}

PreparedItem item(const std::string& sha, Label label, const std::string& generator) {
  PreparedItem it;
  it.sha256 = sha + std::string(64 - sha.size(), '0');
  it.file.label = label;
  it.file.generator = generator;
  return it;
}

}  // namespace

TEST_CASE("PSI equals the symmetrised Kullback-Leibler divergence of scipy.stats.entropy") {
  const std::vector<double> e = {0.25, 0.25, 0.25, 0.25}, a = {0.1, 0.2, 0.3, 0.4};
  auto ref = test::numbers(test::python("monitoring_reference.py", {"psi", joined(e), joined(a)}));
  REQUIRE(ref.size() == 2);
  CHECK(population_stability_index(e, a) == doctest::Approx(ref[0]).epsilon(1e-12));
  CHECK(population_stability_index(e, a) == doctest::Approx(0.2282174).epsilon(1e-6));  // by hand
  // An empty bin on one side: both floored at 1e-4 (common practice).
  const std::vector<double> e2 = {0.5, 0.3, 0.2, 0.0}, a2 = {0.4, 0.3, 0.0, 0.3};
  ref = test::numbers(test::python("monitoring_reference.py", {"psi", joined(e2), joined(a2)}));
  CHECK(population_stability_index(e2, a2) == doctest::Approx(ref[0]).epsilon(1e-12));
  CHECK(population_stability_index(e, e) == 0.0);
  CHECK(psi_reading(0.05) == "stable");
  CHECK(psi_reading(0.1) == "moderate");
  CHECK(psi_reading(0.26) == "major");
}

TEST_CASE("decile edges equal numpy.quantile; each decile bin holds a tenth of the reference") {
  std::mt19937_64 rng(7);
  const auto values = normal_sample(rng, 1000, 0.0);
  const auto expected = test::numbers(
      test::python("monitoring_reference.py", {"deciles", write_values("d.txt", values).string()}));
  const auto edges = decile_edges(values);
  REQUIRE(edges.size() == expected.size());
  for (size_t i = 0; i < edges.size(); ++i) CHECK(edges[i] == doctest::Approx(expected[i]).epsilon(1e-12));
  for (double s : bin_shares(edges, values)) CHECK(s == doctest::Approx(0.1).epsilon(0.02));
  // Tied deciles merge: a constant sample has one edge (two bins).
  CHECK(decile_edges(std::vector<double>(10, 2.0)).size() == 1);
}

TEST_CASE("chi-square 99th percentiles equal scipy.stats.chi2.ppf") {
  const auto expected = test::numbers(test::python("monitoring_reference.py", {"chi2_99"}));
  REQUIRE(expected.size() == 20);
  for (int dof = 1; dof <= 20; ++dof)
    CHECK(chi_square_99(dof) == doctest::Approx(expected[dof - 1]).epsilon(1e-4));
}

TEST_CASE("the PSI noise floor is exceeded about 1 % of the time by batches drawn like the reference") {
  std::mt19937_64 rng(11);
  int exceed = 0;
  const int trials = 400;
  for (int t = 0; t < trials; ++t) {
    const auto reference = normal_sample(rng, 300, 0.0);
    const auto edges = decile_edges(reference);
    const double psi = population_stability_index(bin_shares(edges, reference),
                                                  bin_shares(edges, normal_sample(rng, 200, 0.0)));
    exceed += psi > psi_noise_floor(edges.size() + 1, 200, 300) ? 1 : 0;
  }
  // Nominal 1 %; the chi-square approximation is loose in the tails, so allow 0.25-4 %.
  CHECK(exceed >= 1);
  CHECK(exceed <= trials * 4 / 100);
  // The floor by its formula: 99th percentile of chi-square(9) = 21.666 (scipy, above) over
  // n_eff = 1 / (1/200 + 1/300) = 120.
  CHECK(psi_noise_floor(10, 200, 300) == doctest::Approx(21.666 / 120.0).epsilon(1e-4));
  CHECK(psi_noise_floor(10, 0, 300) == 0.0);
}

TEST_CASE("drift: a batch drawn like the training data is stable, a shifted one asks for retraining") {
  std::mt19937_64 rng(3);
  const TrainingReference ref = simulated_reference(rng, 1000);
  const DriftReport same = assess_drift(ref, simulated_batch(rng, 250, 250, 0.0), 0.5);
  CHECK(same.verdict == "stable");
  for (const auto& row : same.rows) CHECK(row.reading == "stable");

  const DriftReport moved = assess_drift(ref, simulated_batch(rng, 250, 250, 1.0), 0.5);
  CHECK(moved.verdict == "retrain");
  CHECK(moved.rows[0].psi > kPsiMajor);
  CHECK(moved.findings.front().find("Retraining looks due") == 0);

  // A queue with fewer generated images is not drift once its base rate is given...
  const auto mostly_camera = simulated_batch(rng, 450, 50, 0.0);
  CHECK(assess_drift(ref, mostly_camera, 0.1).verdict == "stable");
  // ...but reads as a changed score distribution at the training base rate.
  CHECK(assess_drift(ref, mostly_camera, 0.5).rows[0].reading != "stable");

  // Records without family_distance (an older residue): those rows say "no data", never drift.
  auto no_distance = simulated_batch(rng, 250, 250, 0.0);
  for (auto& s : no_distance) s.distance.clear();
  const DriftReport older = assess_drift(ref, no_distance, 0.5);
  CHECK(older.verdict == "stable");
  CHECK(older.rows[2].summary == "noise distance");
  CHECK(older.rows[2].reading == "no data");

  // Too few images: figures, no flag.
  const DriftReport few = assess_drift(ref, simulated_batch(rng, 20, 20, 2.0), 0.5);
  CHECK(few.too_few);
  CHECK(few.verdict == "stable");
  for (const auto& row : few.rows) CHECK(row.reading == "not judged");
}

TEST_CASE("drift: declared-generated images the model misses are flagged beyond the training miss rate") {
  std::mt19937_64 rng(5);
  const TrainingReference ref = simulated_reference(rng, 1000);
  auto batch = simulated_batch(rng, 400, 100, 0.0);
  for (size_t i = 0; i < 40; ++i) {  // 40 declared generated, all scored likely-camera
    batch[i].declared_generated = true;
    batch[i].band = "likely-camera";
  }
  const DriftReport r = assess_drift(ref, batch, 0.2);
  CHECK(r.declared_generated == 40);
  CHECK(r.declared_generated_missed == 40);
  CHECK(r.declared_miss_expected == doctest::Approx(0.2));
  CHECK(r.verdict == "retrain");
}

TEST_CASE("training reference survives the model file's JSON") {
  std::mt19937_64 rng(9);
  const TrainingReference ref = simulated_reference(rng, 50);
  const auto back = reference_from_json(nlohmann::json::parse(reference_to_json(ref).dump()));
  REQUIRE(back.has_value());
  CHECK(back->images == 100);
  CHECK(back->margin.edges == ref.margin.edges);
  CHECK(back->distance.at("noise").generated == ref.distance.at("noise").generated);
  CHECK(back->generated_bands.at("likely-generated") == 0.8);
  CHECK_FALSE(reference_from_json(nlohmann::json::parse(R"({"images": 3})")).has_value());
}

TEST_CASE("bootstrap percentiles equal numpy.percentile") {
  std::vector<double> v = {3.0, -1.0, 2.5, 7.0, 0.0, 4.25, 1.0, -2.0, 5.5};
  const auto path = write_values("p.txt", v).string();
  std::sort(v.begin(), v.end());
  for (double q : {2.5, 50.0, 97.5}) {
    const auto expected =
        test::numbers(test::python("monitoring_reference.py", {"percentile", std::to_string(q), path}));
    CHECK(percentile_sorted(v, q) == doctest::Approx(expected.at(0)).epsilon(1e-12));
  }
}

TEST_CASE(
    "compare: identical models are the same everywhere; a model blind to one generator is worse there") {
  std::mt19937_64 rng(13);
  std::uniform_real_distribution<double> low(0.0, 0.3), high(0.7, 1.0), any(0.0, 1.0);
  std::vector<int> labels;
  std::vector<std::string> generators;
  ModelScores old_model{"m-old", {}, 0.5}, blind{"m-blind", {}, 0.5}, same{"m-same", {}, 0.5};
  for (int i = 0; i < 300; ++i) {
    const int kind = i % 3;  // 0 camera, 1 generator a, 2 generator b
    labels.push_back(kind == 0 ? 0 : 1);
    generators.push_back(kind == 0 ? "camera" : (kind == 1 ? "a" : "b"));
    const double p = kind == 0 ? low(rng) : high(rng);
    old_model.p.push_back(p);
    same.p.push_back(p);
    blind.p.push_back(kind == 2 ? any(rng) * 0.5 : p);  // NEW never saw b: scores it like camera
  }
  const CompareSettings settings;
  const Comparison identical = compare_models(labels, generators, old_model, same, settings);
  CHECK(identical.new_no_worse);
  REQUIRE(identical.rows.size() == 4);  // camera, a, b, all
  for (const auto& row : identical.rows) CHECK(row.verdict == "same");

  const Comparison regression = compare_models(labels, generators, old_model, blind, settings);
  CHECK_FALSE(regression.new_no_worse);
  CHECK(regression.rows[0].verdict == "same");  // camera
  CHECK(regression.rows[1].verdict == "same");  // a
  CHECK(regression.rows[2].name == "b");
  CHECK(regression.rows[2].verdict == "worse");
  for (const auto& m : regression.rows[2].metrics) {
    CHECK(m.low <= m.change);
    CHECK(m.change <= m.high);
  }
  // The other way round NEW is better on b, and the gate passes.
  const Comparison improved = compare_models(labels, generators, blind, old_model, settings);
  CHECK(improved.new_no_worse);
  CHECK(improved.rows[2].verdict == "better");
  // Reproducible for a seed.
  CHECK(compare_models(labels, generators, old_model, blind, settings).rows[2].metrics[0].low ==
        regression.rows[2].metrics[0].low);
}

// Cluster bootstrap (Davison & Hinkley 1997, sec. 3.8): drawing whole groups, a set in which every
// picture appears ten times gives the same intervals as the pictures once (each draw picks the
// same pictures, ten copies each, and AUC, TPR, FPR and ECE are unchanged by repeating every
// image alike), while drawing the copies one by one makes the intervals about sqrt(10) narrower.
TEST_CASE("compare: groups of copies are drawn whole, so copies do not narrow the interval") {
  std::mt19937_64 rng(21);
  std::uniform_real_distribution<double> camera_p(0.0, 0.6), generated_p(0.3, 1.0), wobble(-0.2, 0.2);
  std::vector<int> labels, copied_labels, groups;
  std::vector<std::string> generators, copied_generators;
  ModelScores a{"m-a", {}, 0.5}, b{"m-b", {}, 0.5}, copied_a{"m-a", {}, 0.5}, copied_b{"m-b", {}, 0.5};
  for (int i = 0; i < 120; ++i) {
    const bool generated = i % 2 == 1;
    const double p = generated ? generated_p(rng) : camera_p(rng);
    const double q = std::clamp(p + wobble(rng), 0.0, 1.0);
    labels.push_back(generated ? 1 : 0);
    generators.push_back(generated ? "g" : "camera");
    a.p.push_back(p);
    b.p.push_back(q);
    for (int copy = 0; copy < 10; ++copy) {
      copied_labels.push_back(labels.back());
      copied_generators.push_back(generators.back());
      copied_a.p.push_back(p);
      copied_b.p.push_back(q);
      groups.push_back(i);
    }
  }
  const CompareSettings settings;
  const Comparison once = compare_models(labels, generators, a, b, settings);
  const Comparison grouped =
      compare_models(copied_labels, copied_generators, copied_a, copied_b, settings, groups);
  const Comparison one_by_one =
      compare_models(copied_labels, copied_generators, copied_a, copied_b, settings);
  CHECK(once.units == 120);
  CHECK(grouped.units == 120);
  CHECK(one_by_one.units == 1200);
  REQUIRE(grouped.rows.size() == once.rows.size());
  double width_ratio = 0.0;
  int metrics = 0;
  for (size_t r = 0; r < once.rows.size(); ++r) {
    for (size_t m = 0; m < once.rows[r].metrics.size(); ++m) {
      const auto& o = once.rows[r].metrics[m];
      const auto& g = grouped.rows[r].metrics[m];
      CHECK(g.change == doctest::Approx(o.change).epsilon(1e-12));
      CHECK(g.low == doctest::Approx(o.low).epsilon(1e-9));
      CHECK(g.high == doctest::Approx(o.high).epsilon(1e-9));
      const auto& n = one_by_one.rows[r].metrics[m];
      if (o.high - o.low > 1e-6) {
        width_ratio += (n.high - n.low) / (o.high - o.low);
        ++metrics;
      }
    }
  }
  REQUIRE(metrics > 0);
  width_ratio /= metrics;
  CHECK(width_ratio > 0.2);  // 1 / sqrt(10) = 0.32, give or take bootstrap noise
  CHECK(width_ratio < 0.45);
}

TEST_CASE("compare: a row drawn from fewer than min_units groups is 'too few', never worse") {
  // Four camera groups and two generators: "g" in 10 groups, "h" in 2 groups of 5 copies.
  std::vector<int> labels, groups;
  std::vector<std::string> generators;
  ModelScores before{"m-before", {}, 0.5}, after{"m-after", {}, 0.5};
  auto add = [&](int label, const std::string& generator, int group, double p_before, double p_after) {
    labels.push_back(label);
    generators.push_back(generator);
    groups.push_back(group);
    before.p.push_back(p_before);
    after.p.push_back(p_after);
  };
  for (int i = 0; i < 40; ++i) add(0, "camera", i % 8, 0.05 + 0.01 * (i % 8), 0.05 + 0.01 * (i % 8));
  for (int i = 0; i < 10; ++i) add(1, "g", 100 + i, 0.9, 0.9);
  for (int i = 0; i < 10; ++i) add(1, "h", 200 + i % 2, 0.9, 0.1);  // NEW misses every h image
  const Comparison c = compare_models(labels, generators, before, after, CompareSettings{}, groups);
  REQUIRE(c.rows.size() == 4);
  CHECK(c.rows[0].units == 8);
  CHECK(c.rows[2].name == "h");
  CHECK(c.rows[2].units == 2);
  CHECK(c.rows[2].verdict == "too few");
  for (const auto& m : c.rows[2].metrics) CHECK(m.verdict == "too few");
  CHECK(c.rows[2].metrics[1].change == doctest::Approx(-1.0));  // the TPR change is still shown
  CHECK(c.rows[3].verdict == "worse");                          // and counts in "all" (20 groups)
  CHECK_FALSE(c.new_no_worse);
  CompareSettings lenient;
  lenient.min_units = 2;
  CHECK(compare_models(labels, generators, before, after, lenient, groups).rows[2].verdict == "worse");
}

TEST_CASE("retraining: settings come back from the parent model and lineage lists what was added") {
  TrainSettings s;
  s.folds = 4;
  s.c_grid = {0.01, 0.1};
  s.target_fpr = 0.02;
  s.group_by = GroupBy::kFolder;
  s.feature_prefixes = {"noise."};
  Model parent;
  parent.id = "m-parent";
  parent.provenance = {{"settings", settings_to_json(s)},
                       {"counts", {{"per_generator", {{"a", 2}}}}},
                       {"training_files", {"1000000000000000", "2000000000000000", "3000000000000000"}}};
  const TrainSettings back = settings_from_model(parent);
  CHECK(back.folds == 4);
  CHECK(back.c_grid == std::vector<double>{0.01, 0.1});
  CHECK(back.target_fpr == 0.02);
  CHECK(back.group_by == GroupBy::kFolder);
  CHECK(back.feature_prefixes == std::vector<std::string>{"noise."});

  const std::vector<PreparedItem> items = {
      item("1", Label::kCamera, "camera"), item("2", Label::kGenerated, "a"),
      item("4", Label::kCamera, "camera"), item("5", Label::kGenerated, "b"),
      item("6", Label::kGenerated, "b")};
  const auto lineage = lineage_of(parent, items);
  CHECK(lineage["parent"] == "m-parent");
  CHECK(lineage["added"]["images"] == 3);
  CHECK(lineage["added"]["camera"] == 1);
  CHECK(lineage["added"]["per_generator"]["b"] == 2);
  CHECK(lineage["added"]["new_generators"] == nlohmann::json::array({"b"}));
  CHECK(lineage["removed"]["images"] == 1);  // "3..." is gone

  Model no_list;
  no_list.id = "m-old";
  CHECK(lineage_of(no_list, items)["added"].is_null());
}
