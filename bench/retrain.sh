#!/usr/bin/env bash
# Retrain after adding 10 % new files to a 10,000-image set, against a cold train.
# Images: tests/cli/make_labelled.py (scikit-image photo crops and SIMULATED upsampling output,
# 256 px PNG). Four timed runs, each wall-clock seconds and peak memory (GNU time):
#   1. cold train on 10,000 images with an empty feature cache (fills it);
#   2. retrain on 11,000 with --from (extracts the 1,000 new files, same C grid);
#   3. retrain on 11,000 with --from --keep-c (parent's C only, no grid search);
#   4. cold train on 11,000 with --no-cache (what the retrain replaces).
# Usage: bench/retrain.sh [build/residue] [workdir] [size]   (size: images in the first set)
set -euo pipefail
residue=${1:-build/residue}
work=${2:-/tmp/residue-retrain-bench}
size=${3:-10000}
here=$(cd "$(dirname "$0")/.." && pwd)
rm -rf "$work" && mkdir -p "$work"
# make_labelled.py COUNT gives COUNT camera and COUNT generated images.
/usr/bin/python3 "$here/tests/cli/make_labelled.py" "$work/set" 1 png png $((size / 2))
/usr/bin/python3 "$here/tests/cli/make_labelled.py" "$work/new" 2 png png $((size / 20))
timed() {  # label, then the command
  local label=$1
  shift
  /usr/bin/time -f "%e %M" -o "$work/time" "$@" > "$work/$label.out" 2> "$work/$label.err"
  read -r seconds kib < "$work/time"
  local ready
  ready=$(grep -o "images ready ([^)]*)[^;]*\(; the cache saved about [0-9.]* s\)\?" "$work/$label.err" || true)
  awk -v l="$label" -v s="$seconds" -v k="$kib" -v r="$ready" \
    'BEGIN { printf "%-34s %7.1f s  peak %4.0f MiB  %s\n", l, s, k / 1024, r }'
}
echo "set: $(find "$work/set" -type f | wc -l) images, adding $(find "$work/new" -type f | wc -l); $(nproc) cores"
timed "cold train, first set" "$residue" train "$work/set" -o "$work/old.json" --cache "$work/cache.sqlite"
cp -r "$work/new/camera/." "$work/set/camera/"
for g in "$work/new/generated/"*; do cp -r "$g/." "$work/set/generated/$(basename "$g")/"; done
timed "retrain --from (cache)" "$residue" train "$work/set" -o "$work/retrained.json" \
  --cache "$work/cache.sqlite" --from "$work/old.json"
timed "retrain --from --keep-c (cache)" "$residue" train "$work/set" -o "$work/kept.json" \
  --cache "$work/cache.sqlite" --from "$work/old.json" --keep-c
timed "cold train, grown set, no cache" "$residue" train "$work/set" -o "$work/cold.json" --no-cache
