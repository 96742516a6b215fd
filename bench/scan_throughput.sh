#!/usr/bin/env bash
# Throughput and peak memory of `residue scan` over 1,000 images on 1 and 2 jobs.
# Images: tests/cli/make_labelled.py (scikit-image photo crops, JPEG and PNG, and SIMULATED
# upsampling output), 256 px. The model is
# trained on a separate simulated set. Needs GNU time (/usr/bin/time, Debian package time).
# Usage: bench/scan_throughput.sh [build/residue] [workdir]
set -euo pipefail
residue=${1:-build/residue}
work=${2:-/tmp/residue-scan-bench}
source "$(dirname "$0")/simulated_set.sh"
simulated_set "$residue" "$work"
echo "images: $n ($(du -sh "$work/images" | cut -f1)), 256 x 256 px, JPEG q90 and PNG"
for jobs in 1 2; do
  /usr/bin/time -f "%e %M" -o "$work/time" "$residue" scan "$work/model.json" "$work/images" --jobs "$jobs" \
    -o "$work/scan-$jobs.jsonl" 2> /dev/null || true
  read -r seconds kib < "$work/time"
  awk -v j="$jobs" -v s="$seconds" -v k="$kib" -v n="$n" \
    'BEGIN { printf "jobs %d: %.1f s, %.1f images/s, peak memory %.0f MiB\n", j, s, n / s, k / 1024 }'
done
