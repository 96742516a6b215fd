// Vectors carried in records (carried.hpp) and the verdict store (verdicts.hpp).
#include <doctest/doctest.h>

#include <atomic>
#include <cmath>
#include <cstdio>
#include <limits>
#include <set>
#include <thread>

#include "residue/training/carried.hpp"
#include "residue/training/verdicts.hpp"
#include "support.hpp"

using namespace residue;

namespace {

std::string hash_of(int k) {
  char buf[65];
  std::snprintf(buf, sizeof buf, "%064x", k);
  return buf;
}

PreparedItem item_with(double first) {
  PreparedItem it;
  it.facts.format = "png";
  it.facts.width = 64;
  it.facts.height = 48;
  it.facts.channels = 3;
  it.facts.dhash = 0xFEDCBA9876543210ULL;
  it.features.values.assign(feature_names().size(), 0.25);
  it.features.values[0] = first;
  return it;
}

}  // namespace

TEST_CASE(
    "carried vectors are IEEE doubles, little-endian, in base64, as Python's base64 and numpy read them") {
  const std::vector<double> values = {1.0, -0.5, M_PI, 1e-300, 6.02214076e23, -0.0, 1.0 / 3.0};
  const std::string text = encode_vector(values);
  // Reference: base64.b64decode + numpy.frombuffer(dtype="<f8"), printed with repr (exact).
  const auto decoded = test::numbers(test::python("carried_reference.py", {"decode", text}));
  REQUIRE(decoded.size() == values.size());
  for (size_t i = 0; i < values.size(); ++i) CHECK(decoded[i] == values[i]);
  // And the other way: numpy's bytes, Python's base64, decoded here bit for bit.
  std::vector<std::string> args = {"encode"};
  for (double v : {2.5, -1e10, 0.1, 7.0}) args.push_back(std::to_string(v));
  const std::string from_python = test::python("carried_reference.py", args);
  const auto back = decode_vector(from_python.substr(0, from_python.find_first_of("\r\n")));
  REQUIRE(back);
  CHECK(*back == std::vector<double>{2.5, -1e10, 0.1, 7.0});
  // Padding of every length: 1, 2 and 3 doubles (8, 16, 24 bytes: "=", "==" and none).
  for (size_t n = 1; n <= 3; ++n) {
    const std::vector<double> v(n, -2.0);
    CHECK(decode_vector(encode_vector(v)) == v);
  }
  CHECK_FALSE(decode_vector("abc"));       // not a multiple of 4 characters
  CHECK_FALSE(decode_vector("AAAAAAA="));  // 5 bytes: not whole doubles
  CHECK_FALSE(decode_vector("!!!!!!!!"));  // not base64
}

TEST_CASE("a carried features member reads back exactly, and another extractor version is refused by name") {
  PreparedItem it = item_with(std::nextafter(1.0, 2.0));
  PreparedCopies copies;
  copies.made.push_back(item_with(-3.0));
  copies.made.back().augmentation = "jpeg-q80";
  copies.failed = {"downscale-0.50"};
  const auto json = carried_to_json(it, &copies, Augment::kLight);
  CHECK(json["extractor"] == kExtractorVersion);
  CHECK(json["schema"] == feature_schema_id());
  auto back = carried_from_json(nlohmann::json::parse(json.dump()));
  REQUIRE(back);
  CHECK(back->item.features.values == it.features.values);
  CHECK(back->item.facts.dhash == it.facts.dhash);
  CHECK(back->copies_level == Augment::kLight);
  REQUIRE(back->copies.made.size() == 1);
  CHECK(back->copies.made[0].augmentation == "jpeg-q80");
  CHECK(back->copies.made[0].features.values[0] == -3.0);
  CHECK(back->copies.failed == std::vector<std::string>{"downscale-0.50"});

  nlohmann::json other = nlohmann::json::parse(json.dump());
  other["extractor"] = "0.0-old";
  auto refused = carried_from_json(other);
  REQUIRE_FALSE(refused);
  CHECK(refused.error().code == ErrorCode::kUnsupported);
  CHECK(refused.error().message.find("0.0-old") != std::string::npos);
  CHECK(refused.error().message.find(kExtractorVersion) != std::string::npos);

  nlohmann::json short_vector = nlohmann::json::parse(json.dump());
  short_vector["vector"] = encode_vector({1.0, 2.0});
  CHECK(carried_from_json(short_vector).error().code == ErrorCode::kCorrupt);
}

TEST_CASE("verdicts are checked member by member") {
  CHECK(verdict_from_json({{"sha256", hash_of(1)}, {"verdict", "camera"}}));
  CHECK(verdict_from_json({{"sha256", hash_of(1)}, {"verdict", "generated"}, {"generator", "g"}}));
  for (const auto& bad :
       {nlohmann::json{{"sha256", "abc"}, {"verdict", "camera"}},
        nlohmann::json{{"sha256", hash_of(1)}, {"verdict", "maybe"}}, nlohmann::json{{"sha256", hash_of(1)}},
        nlohmann::json{{"sha256", hash_of(1)}, {"verdict", "camera"}, {"generator", "g"}},
        nlohmann::json{{"sha256", hash_of(1)}, {"verdict", "generated"}, {"note", 5}},
        nlohmann::json{{"sha256", hash_of(1)}, {"verdict", "camera"}, {"note", std::string(2001, 'x')}},
        nlohmann::json{{"sha256", hash_of(1)}, {"verdict", "camera"}, {"p_generated", 1.5}},
        nlohmann::json::array()}) {
    CAPTURE(bad.dump());
    auto v = verdict_from_json(bad);
    REQUIRE_FALSE(v);
    CHECK(v.error().code == ErrorCode::kCorrupt);
  }
}

TEST_CASE("the verdict store keeps every verdict, reports conflicts, and survives concurrent writers") {
  const auto path = test::scratch() / "verdicts-concurrent.sqlite";
  {
    auto store = VerdictStore::open(path);
    REQUIRE(store);
    Verdict v;
    v.sha256 = hash_of(7);
    v.verdict = "generated";
    v.generator = "g1";
    v.features = carried_to_json(item_with(1.0));
    auto first = (*store)->add(v);
    REQUIRE(first);
    CHECK_FALSE(first->conflict);
    CHECK(first->verdict.id > 0);
    CHECK_FALSE(first->verdict.recorded.empty());
    v.verdict = "camera";
    v.generator.clear();
    v.features.reset();
    auto second = (*store)->add(v);
    REQUIRE(second);
    CHECK(second->conflict);
    REQUIRE(second->earlier.size() == 1);
    CHECK(second->earlier[0].verdict == "generated");
    CHECK(*(*store)->conflicts() == std::vector<std::string>{hash_of(7)});
    // A conflict is left out of training, and said.
    auto items = verdict_items(**store);
    REQUIRE(items);
    CHECK(items->items.empty());
    CHECK(items->conflicts == 1);
    CHECK(*(*store)->remove(second->verdict.id) == 1);
    CHECK(*(*store)->remove(second->verdict.id) == 0);
    items = verdict_items(**store);
    REQUIRE(items->items.size() == 1);
    CHECK(items->items[0].file.label == Label::kGenerated);
    CHECK(items->items[0].file.generator == "g1");
    CHECK(items->items[0].features.values[0] == 1.0);
  }
  // Four threads, each with its own connection (as several service processes have), 50 verdicts each.
  std::vector<std::thread> writers;
  std::atomic<int> failures{0};
  for (int t = 0; t < 4; ++t) {
    writers.emplace_back([&, t] {
      auto store = VerdictStore::open(path);
      if (!store) {
        ++failures;
        return;
      }
      for (int k = 0; k < 50; ++k) {
        Verdict v;
        v.sha256 = hash_of(1000 + t * 50 + k);
        v.verdict = k % 2 == 0 ? "camera" : "generated";
        v.reviewer = "writer-" + std::to_string(t);
        if (!(*store)->add(v)) ++failures;
      }
    });
  }
  for (auto& w : writers) w.join();
  CHECK(failures == 0);
  auto store = VerdictStore::open(path);
  auto all = (*store)->list();
  REQUIRE(all);
  CHECK(all->size() == 201);
  std::set<std::int64_t> ids;
  for (const auto& v : *all) ids.insert(v.id);
  CHECK(ids.size() == all->size());
  auto judged = verdict_items(**store);
  CHECK(judged->without_vector == 200);  // given by hash with nothing to attach: counted, left out
}

TEST_CASE("the bands' agreement with verdicts counts each corner") {
  VerdictAgreement a;
  add_agreement(a, "camera", "likely-generated");
  add_agreement(a, "camera", "likely-camera");
  add_agreement(a, "generated", "likely-camera");
  add_agreement(a, "generated", "likely-generated");
  add_agreement(a, "generated", "likely-generated");
  CHECK(a.images == 5);
  const auto j = agreement_to_json(a);
  CHECK(j["camera_judged_in_likely_generated"] == 1);
  CHECK(j["generated_judged_in_likely_camera"] == 1);
  CHECK(j["by_verdict"]["generated"]["likely-generated"] == 2);
  CHECK(j["by_verdict"]["camera"]["inconclusive"] == 0);
  CHECK(agreement_to_text(a).find("1 judged camera photos were in likely-generated") != std::string::npos);
}
