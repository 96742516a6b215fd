"""End-to-end test of decoder integrity: a damaged file is never judged, a benign decoder note
changes nothing, and no decoder writes to stderr in the middle of a run.

Inputs: JPEGs of scikit-image's astronaut (python3-skimage, public domain) with 20 single-bit
flips in their entropy-coded data, written by this test (libjpeg-turbo then reports "Corrupt JPEG
data: N extraneous bytes before marker 0xd9" and decodes on); scikit-image's chelsea.png, whose
3144-byte HP/Microsoft sRGB profile libpng calls "known incorrect". The damaged file goes through
every way of scoring: scan, the HTTP service, a queue worker (a real redis-server, Debian package
redis-server) and the Python module when it was built.

Usage: test_integrity_cli.py PATH/TO/residue [PYTHON_MODULE_DIR]
"""
import io
import json
import os
import random
import shutil
import subprocess
import sys
import tempfile
import threading
import time
import urllib.request

from PIL import Image

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, runner  # noqa: E402
from redis_fixture import RedisServer  # noqa: E402

residue = sys.argv[1]
module_dir = sys.argv[2] if len(sys.argv) > 2 and sys.argv[2] else None
run = runner(residue)
here = os.path.dirname(os.path.abspath(__file__))
SAMPLES = "/usr/lib/python3/dist-packages/skimage/data"
DECODER_WORDS = ("libpng", "Corrupt JPEG", "iCCP", "libjpeg", "TIFF", "warning", "imdecode")


def flipped_jpegs(folder):
    """Bit-flipped copies of one JPEG; returns their paths."""
    buf = io.BytesIO()
    Image.open(os.path.join(SAMPLES, "astronaut.png")).convert("RGB").save(buf, "JPEG", quality=90)
    raw = buf.getvalue()
    sos = raw.index(b"\xff\xda")
    start = sos + 2 + int.from_bytes(raw[sos + 2:sos + 4], "big")
    paths = []
    for seed in range(8):
        r = random.Random(seed)
        b = bytearray(raw)
        for _ in range(20):
            b[r.randrange(start, len(b) - 2)] ^= 1 << r.randrange(8)
        path = os.path.join(folder, f"flipped_{seed}.jpg")
        with open(path, "wb") as f:
            f.write(b)
        paths.append(path)
    return paths


def quiet(stderr, what):
    found = [w for w in DECODER_WORDS if w in stderr]
    check(not found, f"{what}: no decoder message on stderr ({found}): {stderr[-400:]}")


def damaged_record(r, what):
    check("error" not in r, f"{what}: a damaged but decodable file is scored, not refused: {r.get('error')}")
    check(r.get("band") == "inconclusive", f"{what}: a damaged file is inconclusive, got {r.get('band')}")
    reasons = r.get("reasons", [])
    check(bool(reasons) and reasons[0].startswith("the file is damaged: libjpeg: Corrupt JPEG data"),
          f"{what}: the first reason says the file is damaged: {reasons}")
    kinds = [w["kind"] for w in r.get("decoder_warnings", [])]
    check("damaged" in kinds, f"{what}: decoder_warnings carry the damage: {r.get('decoder_warnings')}")


with tempfile.TemporaryDirectory() as tmp:
    train = os.path.join(tmp, "train")
    subprocess.run(["/usr/bin/python3", os.path.join(here, "make_labelled.py"), train, "1", "jpeg", "png", "24"],
                   check=True)
    shutil.copy(os.path.join(SAMPLES, "chelsea.png"), os.path.join(train, "camera", "chelsea.png"))
    model = os.path.join(tmp, "model.json")
    trained = run(["train", train, "-o", model, "--no-cache"])
    check(trained.returncode == 0, f"train: {trained.stderr[-300:]}")
    quiet(trained.stderr, "train over a PNG with a known-incorrect sRGB profile (and its processed copies)")

    entries = os.path.join(tmp, "entries")
    os.makedirs(entries)
    flipped = flipped_jpegs(entries)
    shutil.copy(os.path.join(SAMPLES, "chelsea.png"), os.path.join(entries, "chelsea.png"))
    # A BMP cut in half: OpenCV's decoder would print its failure; the header check says it first.
    bmp = io.BytesIO()
    Image.open(os.path.join(SAMPLES, "astronaut.png")).convert("RGB").save(bmp, "BMP")
    with open(os.path.join(entries, "cut.bmp"), "wb") as f:
        f.write(bmp.getvalue()[: len(bmp.getvalue()) // 2])
    out = os.path.join(tmp, "scan.jsonl")
    scan = run(["scan", model, entries, "-o", out])
    quiet(scan.stderr, "scan")
    with open(out) as f:
        records = {os.path.basename(r["path"]): r for r in map(json.loads, f)}
    damaged = [name for name, r in records.items()
               if "error" not in r and any(w["kind"] == "damaged" for w in r.get("decoder_warnings", []))]
    check(len(damaged) >= 3, f"most flipped JPEGs decode with a damage warning: {sorted(records)}")
    for name in damaged:
        damaged_record(records[name], f"scan {name}")
    for name in (os.path.basename(p) for p in flipped):
        r = records[name]
        check(r.get("band") not in ("likely-camera", "likely-generated"),
              f"no flipped JPEG gets a band: {name} {r.get('band')} {r.get('error')}")
    check(records["cut.bmp"].get("error", {}).get("code") == "truncated",
          f"a BMP cut in half is truncated: {records['cut.bmp'].get('error')}")
    chelsea = records["chelsea.png"]
    check(chelsea.get("decoder_warnings") == [{"kind": "note", "message": "libpng: iCCP: known incorrect sRGB profile"}],
          f"the sRGB profile warning is kept as a note: {chelsea.get('decoder_warnings')}")
    check(not any(x.startswith("the file is damaged") for x in chelsea.get("reasons", [])),
          "a benign note makes no damaged reason")
    table = run(["scan", model, os.path.join(entries, damaged[0]), "--format", "table"])
    check("the file is damaged" in table.stdout, f"the table says the file is damaged: {table.stdout[-300:]}")
    report = os.path.join(tmp, "report.html")
    made = run(["report", out, "-o", report])
    check(made.returncode == 0, f"report: {made.stderr[-300:]}")
    with open(report) as f:
        page = f.read()
    check("the file is damaged" in page, "the report lists the damaged reason")

    with open(os.path.join(entries, damaged[0]), "rb") as f:
        damaged_bytes = f.read()

    # The HTTP service.
    proc = subprocess.Popen([residue, "serve", model, "--port", "0"], stderr=subprocess.PIPE, text=True)
    port = json.loads(proc.stderr.readline())["port"]
    log = []
    threading.Thread(target=lambda: log.extend(proc.stderr), daemon=True).start()
    try:
        req = urllib.request.Request(f"http://127.0.0.1:{port}/v1/score", data=damaged_bytes, method="POST",
                                     headers={"Content-Type": "application/octet-stream"})
        with urllib.request.urlopen(req, timeout=60) as resp:
            damaged_record(json.loads(resp.read()), "service")
    finally:
        proc.terminate()
        proc.wait(timeout=30)
    time.sleep(0.2)
    quiet("".join(line for line in log if not line.startswith("{")), "service (outside its JSON access log)")

    # A queue worker.
    redis = RedisServer(tmp)
    redis.start()
    try:
        queued = run(["enqueue", os.path.join(entries, damaged[0]), "--redis", redis.url, "--stream", "jobs"])
        check(queued.returncode == 0, f"enqueue: {queued.stderr[-300:]}")
        worker_log = os.path.join(tmp, "worker.log")
        with open(worker_log, "w") as wl:
            worker = subprocess.Popen([residue, "worker", model, "--redis", redis.url, "--stream", "jobs",
                                       "--consumer", "w0", "--block", "0.2"], stdout=wl, stderr=subprocess.STDOUT)
            results = os.path.join(tmp, "results.jsonl")
            got = run(["collect", "--redis", redis.url, "--results", "jobs:results", "-o", results, "--expect", "1",
                       "--wait", "120"])
            worker.terminate()
            worker.wait(timeout=30)
        check(got.returncode == 0, f"collect: {got.stderr[-300:]}")
        with open(results) as f:
            damaged_record(json.loads(f.readline()), "worker")
        with open(worker_log) as f:
            quiet(f.read(), "worker")
    finally:
        redis.stop()

    # The Python module.
    if module_dir:
        probe = subprocess.run(
            ["/usr/bin/python3", "-c",
             "import json, sys; sys.path.insert(0, sys.argv[1]); import residue; "
             "print(json.dumps(residue.Model.load(sys.argv[2]).score(open(sys.argv[3], 'rb').read())))",
             module_dir, model, os.path.join(entries, damaged[0])], capture_output=True, text=True, timeout=120)
        check(probe.returncode == 0, f"python module: {probe.stderr[-300:]}")
        if probe.returncode == 0:
            damaged_record(json.loads(probe.stdout), "python")
        quiet(probe.stderr, "python")

finish()
