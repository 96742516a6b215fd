#!/usr/bin/env bash
# Builds the Debian package build/package/residue_<version>_<arch>.deb from the release build in
# build/ (scripts/setup.sh makes it): the binary, the Python module, manual pages, documentation
# and systemd units (docs/packaging.md). Prints the package's path.
# Usage: scripts/package.sh [BUILD_DIR]
set -euo pipefail
cd "$(dirname "$0")/.."
build=${1:-build}
if [ ! -f "$build/CPackConfig.cmake" ]; then
  echo "scripts/package.sh: no build in $build: run scripts/setup.sh first" >&2
  exit 1
fi
command -v help2man > /dev/null || { echo "scripts/package.sh: help2man is missing: run scripts/setup.sh" >&2; exit 1; }
command -v dpkg-shlibdeps > /dev/null || { echo "scripts/package.sh: dpkg-dev is missing: run scripts/setup.sh" >&2; exit 1; }
cmake --build "$build" -j"$(nproc)" >&2
(cd "$build" && cpack --config CPackConfig.cmake > cpack.log 2>&1) || { cat "$build/cpack.log" >&2; exit 1; }
ls -1 "$build"/package/residue_*.deb | tail -1
