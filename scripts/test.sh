#!/usr/bin/env bash
# Sets up (Debian packages), builds, and runs every test: a release build, then the same tests
# under AddressSanitizer and UndefinedBehaviorSanitizer, then each fuzz target briefly.
# Usage: scripts/test.sh [--no-sanitizers]
set -euo pipefail
cd "$(dirname "$0")/.."

scripts/setup.sh --no-build
jobs=$(nproc)

cmake -S . -B build -DCMAKE_BUILD_TYPE=Release
cmake --build build -j"$jobs"
ctest --test-dir build -j"$jobs" --output-on-failure

if [ "${1:-}" != "--no-sanitizers" ]; then
  cmake -S . -B build-asan -DCMAKE_BUILD_TYPE=RelWithDebInfo -DRESIDUE_SANITIZE=ON
  cmake --build build-asan -j"$jobs"
  UBSAN_OPTIONS=halt_on_error=1:print_stacktrace=1 ctest --test-dir build-asan -j"$jobs" --output-on-failure
  # The fuzz targets keep building and each runs briefly from its seed corpus (docs/reliability.md).
  scripts/fuzz.sh all 20
fi
