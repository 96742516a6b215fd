// File names in records (detector/record.hpp): UTF-8 validity and U+FFFD substitution against
// Python's codec, percent-encoding against urllib.parse.quote (RFC 3986), and the round trip
// through a record. Reference: tests/reference/text_reference.py.
#include <doctest/doctest.h>

#include <fstream>
#include <random>
#include <sstream>

#include "residue/detector/scoring/record.hpp"
#include "support.hpp"

using namespace residue;

namespace {

std::string hex(const std::string& bytes) {
  static constexpr char kHex[] = "0123456789abcdef";
  std::string out;
  for (const char c : bytes) {
    out += kHex[static_cast<unsigned char>(c) >> 4];
    out += kHex[static_cast<unsigned char>(c) & 15];
  }
  return out.empty() ? "-" : out;
}

}  // namespace

TEST_CASE("UTF-8 checks: the Unicode Standard's examples (Table 3-7 and section 3.9)") {
  CHECK(is_valid_utf8("plain ascii/path.png"));
  CHECK(is_valid_utf8("caf\xC3\xA9 \xE2\x82\xAC \xF0\x9F\x93\xB7"));  // é € and a 4-byte character
  CHECK_FALSE(is_valid_utf8("\xC0\x80"));                             // overlong NUL
  CHECK_FALSE(is_valid_utf8("\xE0\x80\xAF"));                         // overlong "/"
  CHECK_FALSE(is_valid_utf8("\xED\xA0\x80"));                         // a surrogate, U+D800
  CHECK_FALSE(is_valid_utf8("\xF4\x90\x80\x80"));                     // above U+10FFFF
  CHECK_FALSE(is_valid_utf8("\xFF"));
  CHECK_FALSE(is_valid_utf8("\xE2\x82"));  // truncated
  // Section 3.9's worked example: 61 F1 80 80 E1 80 C2 62 80 63 80 BF 64 becomes
  // a FFFD FFFD FFFD b FFFD c FFFD FFFD d (maximal subparts F1 80 80, E1 80, C2, 80, 80, BF).
  CHECK(valid_utf8("\x61\xF1\x80\x80\xE1\x80\xC2\x62\x80\x63\x80\xBF\x64") ==
        "a\xEF\xBF\xBD\xEF\xBF\xBD\xEF\xBF\xBD"
        "b\xEF\xBF\xBD"
        "c\xEF\xBF\xBD\xEF\xBF\xBD"
        "d");
}

TEST_CASE("UTF-8 checks and percent-encoding against Python's codec and urllib (2,000 byte strings)") {
  std::mt19937 rng(20261203);
  std::vector<std::string> cases = {"", "100%.png", "a b/c~d_e-f.g", "\xFF\xFE", "caf\xC3\xA9"};
  // Random bytes biased towards the UTF-8 lead and continuation ranges, where the edge cases are.
  const std::string pool =
      "a/%.~ \x7F\x80\x8F\x90\x9F\xA0\xBF\xC0\xC1\xC2\xDF\xE0\xE1\xEC\xED\xEE\xEF"
      "\xF0\xF1\xF3\xF4\xF5\xFF";
  for (int k = 0; k < 2000; ++k) {
    std::string s;
    const int n = static_cast<int>(rng() % 12);
    for (int i = 0; i < n; ++i) {
      s += (rng() % 3 == 0) ? static_cast<char>(rng() % 256) : pool[rng() % pool.size()];
    }
    cases.push_back(s);
  }
  const auto file = test::scratch() / "names.txt";
  {
    std::ofstream out(file);
    for (const auto& c : cases) out << (c.empty() ? "" : hex(c)) << "\n";
  }
  std::istringstream ref(test::python("text_reference.py", {file.string()}));
  size_t agree = 0;
  for (const auto& c : cases) {
    int valid = 0;
    std::string replaced;
    std::string quoted;
    const bool read = static_cast<bool>(ref >> valid >> replaced >> quoted);
    REQUIRE(read);
    if (quoted == "-") quoted.clear();
    const bool ok = is_valid_utf8(c) == (valid == 1) && hex(valid_utf8(c)) == replaced &&
                    percent_encode(c) == quoted && percent_decode(percent_encode(c)) == c;
    if (!ok) FAIL_CHECK("disagrees with Python on bytes " << hex(c));
    agree += ok ? 1 : 0;
  }
  CHECK(agree == cases.size());
}

TEST_CASE("a record keeps any path exactly") {
  for (const std::string path :
       {"/photos/caf\xC3\xA9 100%41.png", "/archive/\xFF\xFE name.jpg", "/a/\xE9t\xE9.png"}) {
    nlohmann::ordered_json r;
    set_path(r, path);
    CHECK(is_valid_utf8(r["path"].get<std::string>()));
    CHECK(r.contains("path_bytes") == !is_valid_utf8(path));
    // Through a JSON line and back, as --resume and collect read it.
    const auto back = nlohmann::json::parse(record_line(r));
    CHECK(path_of(back) == path);
  }
  // A message quoting a bad name does not stop the record from being written.
  auto e = error_record("/x/\xFF.png", {ErrorCode::kUnreadable, "cannot read /x/\xFF.png"});
  CHECK(nlohmann::json::parse(record_line(e))["error"]["message"] == "cannot read /x/\xEF\xBF\xBD.png");
}
