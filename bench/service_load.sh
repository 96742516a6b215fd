#!/usr/bin/env bash
# Load test of `residue serve` with wrk (Debian package wrk) on loopback: a 1 MP JPEG posted by
# 1, 8 and 32 concurrent clients, 20 s each; throughput and p50/p95/p99 latency, and the server's
# peak memory (VmHWM). Traffic stays on 127.0.0.1.
# Usage: bench/service_load.sh [build/residue] [workdir]
# SERVE_ARGS: extra `residue serve` options (e.g. "--window-threads 1"); CLIENTS: the client counts
# (default "1 8 32").
set -euo pipefail
residue=$(realpath "${1:-build/residue}")
work=${2:-/tmp/residue-service-bench}
here=$(cd "$(dirname "$0")/.." && pwd)
rm -rf "$work" && mkdir -p "$work"
/usr/bin/python3 "$here/tests/cli/make_labelled.py" "$work/train" 1 jpeg png 30
"$residue" train "$work/train" -o "$work/model.json" --no-cache > /dev/null 2>&1
/usr/bin/python3 - "$work/photo-1mp.jpg" <<'PY'
import sys
import numpy as np
import skimage.data as data
from PIL import Image
img = Image.fromarray(data.astronaut()).resize((1152, 864), Image.LANCZOS)  # ~1 MP
img.save(sys.argv[1], quality=90)
PY
cat > "$work/post.lua" <<LUA
local f = io.open("$work/photo-1mp.jpg", "rb")
wrk.method = "POST"
wrk.body = f:read("*all")
wrk.headers["Content-Type"] = "application/octet-stream"
f:close()
LUA
# shellcheck disable=SC2086  # SERVE_ARGS is a list of options
"$residue" serve "$work/model.json" --port 18181 --queue 64 --access-log "$work/access.log" ${SERVE_ARGS:-} \
  2> "$work/serve.log" &
pid=$!
trap 'kill $pid 2>/dev/null || true' EXIT
sleep 1
for c in ${CLIENTS:-1 8 32}; do
  echo "== $c concurrent clients"
  wrk -t "$(( c < 2 ? 1 : 2 ))" -c "$c" -d 20s --latency -s "$work/post.lua" http://127.0.0.1:18181/v1/score \
    | grep -E 'Requests/sec|^ +(50|90|99)%|Non-2xx|requests in'
done
echo "server peak memory: $(grep VmHWM /proc/$pid/status | awk '{print $2/1024 " MiB"}')"
