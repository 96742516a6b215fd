#!/usr/bin/env bash
# Installs residue's build and test dependencies from Debian's packages, then builds.
# Usage: scripts/setup.sh [--no-build]
set -euo pipefail
cd "$(dirname "$0")/.."

packages=(
  build-essential cmake pkg-config
  libfftw3-dev libsvm-dev liblinear-dev doctest-dev libcli11-dev nlohmann-json3-dev
  libeigen3-dev libboost-dev libexiv2-dev libssl-dev libsqlite3-dev libcpp-httplib-dev libhiredis-dev
  libopencv-core-dev libopencv-imgproc-dev libopencv-imgcodecs-dev
  libjpeg62-turbo-dev libpng-dev libwebp-dev libtiff-dev
  # the Python module (docs/python.md), built for /usr/bin/python3
  pybind11-dev python3-dev
  # reference libraries for the tests (Debian's, used by /usr/bin/python3)
  python3 python3-numpy python3-scipy python3-skimage python3-pil python3-sklearn exiv2
  # the service test checks every response against docs/openapi.yaml
  python3-jsonschema python3-yaml
  # a real Redis server for the work-queue tests (they start their own on loopback)
  redis-server redis-tools
  # GNU time, for the peak memory the bad-batch test checks; promtool (in Debian's prometheus
  # package) for the service test's check of /metrics
  time prometheus
  # the review page's browser test drives Debian's headless chromium through selenium
  chromium chromium-driver python3-selenium
  # the Debian package: man pages from --help, lintian, and systemd-analyze for the units
  help2man lintian systemd dpkg-dev file
  # the service load benchmark (bench/service_load.sh)
  wrk
)

scripts/install_packages.sh "${packages[@]}"

if [ "${1:-}" != "--no-build" ]; then
  cmake -S . -B build -DCMAKE_BUILD_TYPE=Release
  cmake --build build -j"$(nproc)"
fi
