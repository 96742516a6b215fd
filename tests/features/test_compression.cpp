// Compression history: JPEG quality from quantisation tables (ITU-T T.81 Annex K with the IJG
// scaling), checked on files written by Pillow (Debian python3-pil, which uses libjpeg's tables),
// and block-grid strength.
#include <doctest/doctest.h>

#include "residue/features/compression.hpp"
#include "residue/features/extract.hpp"
#include "support.hpp"

using namespace residue;

namespace {

Extraction extract_made(const std::string& name) {
  const auto dir = test::scratch() / "compression";
  static bool made = false;
  if (!made) {
    test::python("make_files.py", {dir.string()});
    made = true;
  }
  auto e = extract_file(dir / name);
  REQUIRE(e.ok());
  return std::move(e).value();
}

}  // namespace

TEST_CASE("Annex K tables and IJG scaling: worked values") {
  // T.81 Table K.1 starts 16 11 10 16 24 40 51 61 and ends 103 99; K.2 starts 17 18 24 47.
  CHECK(annex_k_luma_table()[0] == 16);
  CHECK(annex_k_luma_table()[7] == 61);
  CHECK(annex_k_luma_table()[63] == 99);
  CHECK(annex_k_chroma_table()[0] == 17);
  CHECK(annex_k_chroma_table()[3] == 47);
  CHECK(annex_k_chroma_table()[63] == 99);
  // Quality 50 is the table itself; quality 75 halves it: (16 * 50 + 50) / 100 = 8.
  CHECK(ijg_scaled_table(annex_k_luma_table(), 50) == annex_k_luma_table());
  CHECK(ijg_scaled_table(annex_k_luma_table(), 75)[0] == 8);
  // Quality 100 makes every entry 1; quality 1 clamps to the baseline maximum 255.
  CHECK(ijg_scaled_table(annex_k_luma_table(), 100)[63] == 1);
  CHECK(ijg_scaled_table(annex_k_luma_table(), 1)[63] == 255);
}

TEST_CASE("the estimated JPEG quality equals the quality the file was written at") {
  for (int q : {50, 75, 90, 95}) {
    CAPTURE(q);
    const Extraction e = extract_made("coffee_q" + std::to_string(q) + ".jpg");
    REQUIRE(e.compression.jpeg.has_value());
    CHECK(e.compression.jpeg->quality == q);
    CHECK(e.compression.jpeg->exact);
  }
  CHECK_FALSE(extract_made("coffee.png").compression.jpeg.has_value());
}

TEST_CASE("block-grid strength is high for JPEG quality 75 and low for PNG") {
  const double jpeg = extract_made("coffee_q75.jpg").compression.block_grid_strength;
  const double png = extract_made("coffee.png").compression.block_grid_strength;
  CHECK(jpeg > 1.3);
  CHECK(png < 1.15);
  CHECK(png > 0.95);  // about 1 without a grid, by construction
}
