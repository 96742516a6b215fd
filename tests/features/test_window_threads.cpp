// One image's windows on several threads (window_threads.hpp): every index once, errors carried
// back, concurrent callers, and the same vector as on one thread.
#include <doctest/doctest.h>

#include <atomic>
#include <chrono>
#include <mutex>
#include <set>
#include <stdexcept>
#include <thread>
#include <vector>

#include "residue/features/extract.hpp"
#include "residue/features/window_threads.hpp"
#include "support.hpp"

using namespace residue;

TEST_CASE("parallel_indices runs every index exactly once, whatever the threads asked for") {
  for (const int threads : {1, 2, 3, 8}) {
    for (const size_t count : {size_t{0}, size_t{1}, size_t{2}, size_t{9}, size_t{500}}) {
      std::vector<std::atomic<int>> runs(count);
      parallel_indices(count, threads, [&](size_t i) { runs[i].fetch_add(1); });
      for (size_t i = 0; i < count; ++i) {
        CAPTURE(threads);
        CAPTURE(i);
        CHECK(runs[i].load() == 1);
      }
    }
  }
}

TEST_CASE("parallel_indices: idle helpers join a caller's work, and max_threads 1 keeps it on the caller") {
  // Work slow enough (2 ms an index) that an idle helper wakes and takes some of it.
  std::mutex mutex;
  std::set<std::thread::id> seen;
  auto work = [&](size_t) {
    std::this_thread::sleep_for(std::chrono::milliseconds(2));
    std::lock_guard lock(mutex);
    seen.insert(std::this_thread::get_id());
  };
  parallel_indices(64, 1, work);
  CHECK(seen == std::set<std::thread::id>{std::this_thread::get_id()});
  seen.clear();
  parallel_indices(64, 8, work);
  CHECK(seen.count(std::this_thread::get_id()) == 1);  // the caller always works
  if (available_cores() >= 2) {
    CHECK(seen.size() >= 2);
    CHECK(static_cast<int>(seen.size()) <= available_cores());  // cores - 1 helpers and the caller
  } else {
    CHECK(seen.size() == 1);
  }
}

TEST_CASE("parallel_indices from many callers at once: each gets all of its own indices") {
  constexpr int kCallers = 6;
  constexpr size_t kCount = 300;
  std::vector<std::vector<std::atomic<int>>> runs(kCallers);
  for (auto& r : runs) r = std::vector<std::atomic<int>>(kCount);
  std::vector<std::thread> callers;
  callers.reserve(kCallers);
  for (int c = 0; c < kCallers; ++c) {
    callers.emplace_back([&, c] {
      for (int round = 0; round < 20; ++round)
        parallel_indices(kCount, 4, [&](size_t i) { runs[static_cast<size_t>(c)][i].fetch_add(1); });
    });
  }
  for (auto& t : callers) t.join();
  for (const auto& r : runs) {
    for (const auto& n : r) CHECK(n.load() == 20);
  }
}

TEST_CASE("parallel_indices hands an exception back to the caller and stays usable") {
  std::atomic<int> done{0};
  CHECK_THROWS_AS(parallel_indices(50, 4,
                                   [&](size_t i) {
                                     if (i == 17) throw std::runtime_error("window 17 failed");
                                     done.fetch_add(1);
                                   }),
                  std::runtime_error);
  CHECK(done.load() == 49);  // the others still ran: a window never half-finishes another's work
  std::atomic<int> after{0};
  parallel_indices(10, 4, [&](size_t) { after.fetch_add(1); });
  CHECK(after.load() == 10);
  CHECK(available_cores() >= 1);
}

TEST_CASE("windows on several threads give the same vector, bit for bit, as on one") {
  // scikit-image's "astronaut" (512 x 512 colour): 4 windows of 256 px, or 9 of 128 px.
  const Image astronaut = test::load(test::sample("astronaut.png"));
  for (const int standard : {256, 128}) {
    ExtractOptions one;
    one.windows.standard_size = standard;
    const auto reference = extract_image(astronaut, one);
    REQUIRE(reference.ok());
    REQUIRE(reference->features.windows.size() >= 4);
    for (const int threads : {2, 3, 16}) {
      ExtractOptions many = one;
      many.window_threads = threads;
      const auto got = extract_image(astronaut, many);
      REQUIRE(got.ok());
      CAPTURE(standard);
      CAPTURE(threads);
      CHECK(got->features.values == reference->features.values);
      CHECK(got->features.windows == reference->features.windows);
      CHECK(got->compression.block_grid_strength == reference->compression.block_grid_strength);
      CHECK(got->processing.fine_detail == reference->processing.fine_detail);
    }
  }
}
