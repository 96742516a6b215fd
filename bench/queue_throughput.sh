#!/usr/bin/env bash
# Throughput of residue worker over Redis Streams with 1 and 2 workers, against plain
# `residue scan --jobs 1` on the same 1,000 images: jobs per second and the overhead per job.
# Images as bench/scan_throughput.sh (256 px JPEG and PNG, SIMULATED upsampling output among them).
# Starts its own redis-server (Debian package redis-server) on a free loopback port, with the
# append-only file on and fsync once a second (Redis's default for AOF).
# Needs bc (Debian package bc).
# Usage: bench/queue_throughput.sh [build/residue] [workdir]
set -euo pipefail
residue=$(realpath "${1:-build/residue}")
work=${2:-/tmp/residue-queue-bench}
source "$(dirname "$0")/simulated_set.sh"
simulated_set "$residue" "$work"
port=$(/usr/bin/python3 -c "import socket; s=socket.socket(); s.bind(('127.0.0.1', 0)); print(s.getsockname()[1])")
redis-server --port "$port" --bind 127.0.0.1 --dir "$work" --appendonly yes --appendfsync everysec --save "" \
  > "$work/redis.log" 2>&1 &
redis_pid=$!
trap 'kill $redis_pid 2> /dev/null || true' EXIT
until redis-cli -p "$port" ping > /dev/null 2>&1; do sleep 0.1; done
url="redis://127.0.0.1:$port"
echo "images: $n, 256 x 256 px; $(nproc) cores; redis-server $(redis-server --version | grep -o 'v=[0-9.]*')"

start=$(date +%s.%N)
"$residue" scan "$work/model.json" "$work/images" --jobs 1 -o "$work/scan.jsonl" 2> /dev/null || true
scan_s=$(echo "$(date +%s.%N) - $start" | bc)
printf "scan --jobs 1:       %6.1f s  %6.1f images/s\n" "$scan_s" "$(echo "$n / $scan_s" | bc -l)"

for workers in 1 2; do
  stream="bench$workers"
  pids=()
  for w in $(seq "$workers"); do
    "$residue" worker "$work/model.json" --redis "$url" --stream "$stream" --consumer "w$w" 2> "$work/w$w.log" &
    pids+=($!)
  done
  start=$(date +%s.%N)
  "$residue" enqueue "$work/images" --redis "$url" --stream "$stream" > /dev/null 2>&1
  enqueued=$(date +%s.%N)
  "$residue" collect --redis "$url" --results "$stream:results" --expect "$n" --wait 600 -o "$work/$stream.jsonl" 2> /dev/null
  end=$(date +%s.%N)
  kill -TERM "${pids[@]}"
  wait "${pids[@]}" || true
  s=$(echo "$end - $start" | bc)
  printf "%d worker(s):         %6.1f s  %6.1f jobs/s  (enqueue %.2f s)" "$workers" "$s" "$(echo "$n / $s" | bc -l)" \
    "$(echo "$enqueued - $start" | bc)"
  if [ "$workers" = 1 ]; then
    printf "  overhead per job vs scan: %.1f ms" "$(echo "($s - $scan_s) * 1000 / $n" | bc -l)"
  fi
  echo
done
echo "Redis memory after both runs: $(redis-cli -p "$port" info memory | grep used_memory_human | tr -d '\r')"
