// Window policy (docs/architecture.md): worked examples of the placement rule.
#include <doctest/doctest.h>

#include "residue/features/windows.hpp"

using namespace residue;

TEST_CASE("large images get up to 3 x 3 windows of 256 px on multiples of 8") {
  auto layout = plan_windows(1000, 872);
  REQUIRE(layout.ok());
  CHECK(layout->size == 256);
  CHECK_FALSE(layout->reduced);
  REQUIRE(layout->origins.size() == 9);
  // x: (1000 - 256) / 2 = 372 -> 368 after rounding down to a multiple of 8; last 744.
  CHECK(layout->origins[0].x == 0);
  CHECK(layout->origins[1].x == 368);
  CHECK(layout->origins[2].x == 744);
  // y: (872 - 256) / 2 = 308 -> 304; last 616.
  CHECK(layout->origins[3].y == 304);
  CHECK(layout->origins[8].y == 616);
  for (const auto& o : layout->origins) {
    CHECK(o.x % 8 == 0);
    CHECK(o.y % 8 == 0);
    CHECK(o.x + 256 <= 1000);
    CHECK(o.y + 256 <= 872);
  }
}

TEST_CASE("one centred window when a side holds a single window") {
  auto layout = plan_windows(300, 451);
  REQUIRE(layout.ok());
  REQUIRE(layout->origins.size() == 1);
  CHECK(layout->origins[0].x == 16);  // (300 - 256) / 2 = 22 -> 16
  CHECK(layout->origins[0].y == 96);  // (451 - 256) / 2 = 97 -> 96
}

TEST_CASE("thumbnails: largest power of two that fits, down to the floor, then refused") {
  auto small = plan_windows(200, 180);
  REQUIRE(small.ok());
  CHECK(small->size == 128);
  CHECK(small->reduced);
  auto floor = plan_windows(64, 64);
  REQUIRE(floor.ok());
  CHECK(floor->size == 64);
  auto refused = plan_windows(63, 500);
  REQUIRE_FALSE(refused.ok());
  CHECK(refused.error().code == ErrorCode::kTooSmall);
}
