#!/usr/bin/env bash
# Builds the libFuzzer targets with clang under AddressSanitizer + UndefinedBehaviorSanitizer
# (build-fuzz/) and runs one for SECONDS (or, with --runs N, for N executions), starting from a seed
# corpus the tests' own generators write (fuzz-corpus/TARGET/, kept between runs; new inputs found
# are added there). Crashes, leaks and timeouts are saved as fuzz-corpus/TARGET-crash-* and fail the
# run. Needs scripts/setup.sh's packages plus clang and libclang-rt-dev (installed here if missing).
# Usage: scripts/fuzz.sh TARGET SECONDS | scripts/fuzz.sh TARGET --runs N | scripts/fuzz.sh all SECONDS
#   TARGET: header extract model record redis_reply service
set -euo pipefail
cd "$(dirname "$0")/.."
targets=(header extract model record redis_reply service)
if [ $# -lt 2 ]; then
  echo "usage: scripts/fuzz.sh TARGET SECONDS | TARGET --runs N   (TARGET: ${targets[*]} or all)" >&2
  exit 2
fi
target=$1
shift
if [ "$1" = "--runs" ]; then limit=(-runs="$2"); else limit=(-max_total_time="$1"); fi

scripts/install_packages.sh clang libclang-rt-dev
if [ ! -f build-fuzz/CMakeCache.txt ]; then
  CC=clang CXX=clang++ cmake -S . -B build-fuzz -DCMAKE_BUILD_TYPE=RelWithDebInfo -DRESIDUE_FUZZ=ON > /dev/null
fi
cmake --build build-fuzz -j"$(nproc)" > /dev/null

corpus=fuzz-corpus
seeds() {  # seeds TARGET DIR: writes the seed inputs for TARGET into DIR
  local t=$1 dir=$2
  mkdir -p "$dir"
  case $t in
    header)
      /usr/bin/python3 tests/reference/make_files.py "$corpus/.files" > /dev/null
      find "$corpus/.files" -type f -size -300k -exec cp {} "$dir/" \; ;;
    extract)
      # Small images of every container and layout, so that one execution (every family, under the
      # sanitizers) stays well under a second; the header target has the large ones.
      /usr/bin/python3 - "$dir" <<'PY'
import sys
import numpy as np
import skimage.data as data
from PIL import Image
out, photo = sys.argv[1], data.astronaut()
for size in (64, 96):
    im = Image.fromarray(photo[100:100 + size, 180:180 + size])
    im.save(f"{out}/rgb{size}.png")
    im.save(f"{out}/rgb{size}.jpg", quality=85)
    im.save(f"{out}/rgb{size}.webp", quality=80)
    im.save(f"{out}/rgb{size}.tif")
    im.save(f"{out}/rgb{size}.bmp")
    im.convert("L").save(f"{out}/grey{size}.png")
    im.quantize(64).save(f"{out}/palette{size}.png")
    im.convert("RGBA").save(f"{out}/rgba{size}.webp", lossless=True)
    Image.fromarray(np.asarray(im.convert("L"), np.uint16) * 257).save(f"{out}/grey16_{size}.png")
    im.save(f"{out}/progressive{size}.jpg", quality=70, progressive=True)
# Damaged but decodable (the decoder warns and goes on): JPEGs with flipped bits in the
# entropy-coded data, a PNG whose text chunk fails its CRC, a PNG with a known-incorrect sRGB
# profile (scikit-image's chelsea.png carries one; libpng calls it a benign note).
import io, random, zlib
from skimage.data import data_dir
for size in (64, 96):
    buf = io.BytesIO()
    Image.fromarray(photo[100:100 + size, 180:180 + size]).save(buf, "JPEG", quality=90)
    raw = buf.getvalue()
    sos = raw.index(b"\xff\xda")
    start = sos + 2 + int.from_bytes(raw[sos + 2:sos + 4], "big")
    for seed in range(3):
        r, b = random.Random(seed), bytearray(raw)
        for _ in range(4):
            b[r.randrange(start, len(b) - 2)] ^= 1 << r.randrange(8)
        open(f"{out}/flipped{size}_{seed}.jpg", "wb").write(b)
png = io.BytesIO()
Image.fromarray(photo[:64, :64]).save(png, "PNG")
raw = png.getvalue()
text = b"tEXt" + b"Comment\0damaged"
chunk = len(text[4:]).to_bytes(4, "big") + text + ((zlib.crc32(text) ^ 1) & 0xFFFFFFFF).to_bytes(4, "big")
open(f"{out}/bad_crc_text64.png", "wb").write(raw[:33] + chunk + raw[33:])
chelsea = Image.open(f"{data_dir}/chelsea.png")
chelsea.crop((0, 0, 64, 64)).save(f"{out}/srgb_note64.png", icc_profile=chelsea.info["icc_profile"])
PY
      ;;
    model)
      cp "$corpus/.model.json" "$dir/model.json" ;;
    record)
      printf '/photos/a.png' > "$dir/plain"
      printf '/archive/\xff\xfe name.jpg' > "$dir/latin1"
      printf '/x/caf\xc3\xa9 100%%41.png' > "$dir/utf8" ;;
    redis_reply)
      printf '+OK\r\n' > "$dir/status"
      printf -- '-LOADING Redis is loading\r\n' > "$dir/error"
      printf ':42\r\n' > "$dir/integer"
      printf '$-1\r\n' > "$dir/nil"
      printf '*1\r\n*2\r\n$6\r\njobs-1\r\n*1\r\n*2\r\n$15\r\n1700000000000-0\r\n*4\r\n$3\r\njob\r\n$1\r\n7\r\n$4\r\npath\r\n$6\r\n/a.png\r\n' > "$dir/xreadgroup" ;;
    service)
      local image
      # the sample files the header target's seeds come from, when that target has not run yet
      [ -d "$corpus/.files" ] || /usr/bin/python3 tests/reference/make_files.py "$corpus/.files" > /dev/null
      image=$(find "$corpus/.files" -name 'thumb_150x100.png' | head -1)
      printf 'GET /v1/health HTTP/1.1\r\nHost: x\r\n\r\n' > "$dir/health"
      printf 'GET /metrics HTTP/1.1\r\nHost: x\r\n\r\n' > "$dir/metrics"
      printf 'GET /v1/model HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer fuzz-token\r\n\r\n' > "$dir/model"
      printf 'POST /v1/score HTTP/1.1\r\nHost: x\r\nContent-Length: 40000000\r\n\r\n' > "$dir/no-token"
      { printf 'POST /v1/score?prior=0.2 HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer fuzz-token\r\n'
        printf 'Content-Type: application/x-www-form-urlencoded\r\nContent-Length: %d\r\n\r\n' "$(stat -c %s "$image")"
        cat "$image"; } > "$dir/score"
      { printf 'POST /v1/score HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer fuzz-token\r\n'
        printf 'Transfer-Encoding: chunked\r\n\r\n5\r\nhello\r\n0\r\n\r\n'; } > "$dir/chunked"
      { printf 'POST /v1/score HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer fuzz-token\r\n'
        printf 'Content-Type: multipart/form-data; boundary=b\r\nContent-Length: 66\r\n\r\n'
        printf -- '--b\r\nContent-Disposition: form-data; name="f"; filename="x"\r\n\r\nabc\r\n--b--\r\n'; } > "$dir/multipart"
      local verdict='{"sha256":"0000000000000000000000000000000000000000000000000000000000000000","verdict":"camera","note":"n"}'
      { printf 'POST /v1/verdicts HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer fuzz-token\r\n'
        printf 'Content-Type: application/json\r\nContent-Length: %d\r\n\r\n%s' "${#verdict}" "$verdict"; } > "$dir/verdict"
      local body="$dir/.verdict-body"
      { printf -- '--b\r\nContent-Disposition: form-data; name="verdict"\r\n\r\ncamera\r\n'
        printf -- '--b\r\nContent-Disposition: form-data; name="image"; filename="i.png"\r\n\r\n'
        cat "$image"; printf -- '\r\n--b--\r\n'; } > "$body"
      { printf 'POST /v1/verdicts HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer fuzz-token\r\n'
        printf 'Content-Type: multipart/form-data; boundary=b\r\nContent-Length: %d\r\n\r\n' "$(stat -c %s "$body")"
        cat "$body"; } > "$dir/verdict-image"
      rm "$body" ;;
  esac
}

model() {  # a small model for the model and service targets (simulated images)
  if [ ! -f "$corpus/.model.json" ]; then
    mkdir -p "$corpus"
    /usr/bin/python3 tests/cli/make_labelled.py "$corpus/.train" 1 jpeg png 12 > /dev/null
    build/residue train "$corpus/.train" -o "$corpus/.model.json" --no-cache --augment none --folds 3 > /dev/null 2>&1 ||
      { echo "fuzz.sh: training the fuzz model needs build/residue (scripts/setup.sh)" >&2; exit 1; }
  fi
  export RESIDUE_FUZZ_MODEL="$PWD/$corpus/.model.json"
}

run_one() {
  local t=$1 max_len=400000
  [ "$t" = extract ] && max_len=65536
  [ -d "$corpus/$t" ] || seeds "$t" "$corpus/$t"
  echo "== fuzz_$t ${limit[*]}"
  # The seeds live in fuzz-corpus/TARGET; new inputs go there too.
  build-fuzz/fuzz/fuzz_"$t" "$corpus/$t" "${limit[@]}" -rss_limit_mb=2560 -timeout=25 -max_len="$max_len" \
    -artifact_prefix="$corpus/$t-" -print_final_stats=1 2>&1 | grep -v -e "^#[0-9]*\s*\(NEW\|REDUCE\|pulse\)" -e "^\"" -e "^######" | tail -60
}

model
export UBSAN_OPTIONS=halt_on_error=1:print_stacktrace=1
if [ "$target" = all ]; then
  for t in "${targets[@]}"; do run_one "$t"; done
else
  run_one "$target"
fi
