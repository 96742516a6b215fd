"""Fault injection: residue killed with SIGKILL at random moments, and writes that run out of room.

What must hold (issue: hardening):
- `train`: the model file is either absent or a whole model from a finished run; the SQLite
  feature cache stays consistent (PRAGMA integrity_check) and a later run finishes from it with the
  same model a clean run gives;
- `scan -o` then `--resume`, killed again and again: in the end every input has exactly one
  record, each the same as an uninterrupted scan's; a file cut at any byte (a kill in the middle
  of a line) is resumed without loss or duplicate;
- `report` and `compare --html`: the page is either the earlier whole page or the new whole page;
- a file size limit (`ulimit -f`, what a full disk looks like to a program): a clear message naming
  the file and the reason, exit 1, the earlier file untouched, no temporary file left.
Images: make_labelled.py (scikit-image's sample photographs and SIMULATED generated images).
The kill moments are drawn from a seeded generator, spread over each command's measured duration.

Usage: test_faults.py PATH/TO/residue
"""
import glob
import json
import os
import random
import resource
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, runner  # noqa: E402

residue = sys.argv[1]
run = runner(residue)
here = os.path.dirname(os.path.abspath(__file__))
rng = random.Random(29)
KILLS = 6  # per command


def timed(args):
    """Runs residue to the end; (CompletedProcess, seconds)."""
    start = time.monotonic()
    r = run(args)
    return r, time.monotonic() - start


def killed(args, after):
    """Starts residue, sends SIGKILL after `after` seconds; True if it was still running then."""
    p = subprocess.Popen([residue] + args, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        p.wait(timeout=after)
        return False  # finished before the kill
    except subprocess.TimeoutExpired:
        p.send_signal(signal.SIGKILL)
        p.wait()
        return True


def limited(args, kib):
    """Runs residue with a file size limit of `kib` KiB (RLIMIT_FSIZE, as `ulimit -f`)."""
    def limit():
        resource.setrlimit(resource.RLIMIT_FSIZE, (kib * 1024, kib * 1024))
    return subprocess.run([residue] + args, capture_output=True, text=True, timeout=600, preexec_fn=limit)


def records(path):
    with open(path, encoding="utf-8") as f:
        return [json.loads(line) for line in f]


def scores(path):
    return {r["path"]: r.get("p_generated") for r in records(path)}


def leftovers(folder):
    return sorted(glob.glob(os.path.join(folder, "*.tmp-*")))


with tempfile.TemporaryDirectory() as tmp:
    data = os.path.join(tmp, "data")
    held = os.path.join(tmp, "held")
    subprocess.run([sys.executable, os.path.join(here, "make_labelled.py"), data, "3", "png", "jpeg", "40"], check=True)
    subprocess.run([sys.executable, os.path.join(here, "make_labelled.py"), held, "4", "jpeg", "png", "16"], check=True)
    inputs = sorted(glob.glob(os.path.join(data, "**", "*.*"), recursive=True))

    # ---- train ----
    reference = os.path.join(tmp, "reference.json")
    train_args = ["--augment", "light", "--folds", "3", "-j", "2"]
    r, train_seconds = timed(["train", data, "-o", reference, "--cache", os.path.join(tmp, "clean.sqlite")] + train_args)
    check(r.returncode == 0, f"a clean train exits 0: {r.stderr[-300:]}")
    # A run that finds every vector in the cache is quicker; the killed runs fill their cache bit by
    # bit, so half the kill moments are drawn over the quicker run's duration.
    r, cached_seconds = timed(["train", data, "-o", reference, "--cache", os.path.join(tmp, "clean.sqlite")] + train_args)
    model = os.path.join(tmp, "model.json")
    cache = os.path.join(tmp, "killed.sqlite")
    interrupted = 0
    for k in range(KILLS):
        interrupted += killed(["train", data, "-o", model, "--cache", cache] + train_args,
                              rng.uniform(0.05, cached_seconds if k % 2 else train_seconds))
        if os.path.exists(model):  # only a finished run may have put it there
            with open(model, encoding="utf-8") as f:
                text = f.read()
            try:
                json.loads(text)
                whole = True
            except ValueError:
                whole = False
            check(whole, f"after kill {k} the model file is a whole JSON document")
            check(run(["scan", model, inputs[0]]).returncode == 0, f"after kill {k} the model file loads")
        if os.path.exists(cache):
            with sqlite3.connect(cache) as db:
                check(db.execute("PRAGMA integrity_check").fetchone()[0] == "ok",
                      f"after kill {k} the feature cache passes SQLite's integrity check")
    check(interrupted >= KILLS // 2, f"most kills landed while train was running ({interrupted} of {KILLS})")
    r = run(["train", data, "-o", model, "--cache", cache] + train_args)
    check(r.returncode == 0, f"train finishes after the kills: {r.stderr[-300:]}")
    with open(model) as f, open(reference) as g:
        mine, theirs = json.load(f), json.load(g)
    check(mine["linear"] == theirs["linear"] and mine["calibration"] == theirs["calibration"],
          "the model trained from the killed runs' cache equals the clean run's (weights and bias)")
    for name in leftovers(tmp):
        os.remove(name)  # a killed writer's temporary file: never read, safe to delete

    # ---- scan -o, killed, then --resume until done ----
    truth_path = os.path.join(tmp, "truth.jsonl")
    r, scan_seconds = timed(["scan", reference, data, "-o", truth_path, "-j", "2"])
    check(r.returncode == 0, f"a clean scan exits 0: {r.stderr[-300:]}")
    truth = scores(truth_path)
    check(len(truth) == len(inputs), "the clean scan has one record per input")
    out = os.path.join(tmp, "out.jsonl")
    interrupted = killed(["scan", reference, data, "-o", out, "-j", "2"], rng.uniform(0.05, scan_seconds))
    for k in range(KILLS - 1):
        interrupted += killed(["scan", reference, data, "--resume", out, "-j", "2"], rng.uniform(0.05, scan_seconds / 2))
    check(interrupted >= KILLS // 2, f"most kills landed while scan was running ({interrupted} of {KILLS})")
    r = run(["scan", reference, data, "--resume", out, "-j", "2"])
    check(r.returncode == 0, f"the last --resume exits 0: {r.stderr[-300:]}")
    got = records(out)
    paths = [g["path"] for g in got]
    check(len(paths) == len(set(paths)), f"no input is recorded twice ({len(paths) - len(set(paths))} duplicates)")
    check(set(paths) == set(truth), "every input is recorded")
    check(all(g.get("p_generated") == truth[g["path"]] for g in got), "each record equals the clean scan's")

    # A kill in the middle of a line, at any byte: cut a whole output at random offsets and resume.
    with open(truth_path, "rb") as f:
        whole = f.read()
    for k in range(8):
        cut = rng.randrange(1, len(whole))
        with open(out, "wb") as f:
            f.write(whole[:cut])
        r = run(["scan", reference, data, "--resume", out, "-j", "2"])
        got = records(out)  # every line parses: the half line was cut before appending
        check(r.returncode == 0 and sorted(g["path"] for g in got) == sorted(truth),
              f"output cut at byte {cut} of {len(whole)}: resumed without loss or duplicate")

    # ---- report ----
    big = os.path.join(tmp, "big.jsonl")
    with open(big, "wb") as f:
        f.write(whole * 300)  # about 30,000 records, so that the report takes a while
    page = os.path.join(tmp, "report.html")
    r, report_seconds = timed(["report", big, "-o", page])
    check(r.returncode == 0, f"report exits 0: {r.stderr[-300:]}")
    with open(page, "rb") as f:
        finished = f.read()
    check(finished.rstrip().endswith(b"</html>"), "the report ends with </html>")
    interrupted = 0
    for k in range(KILLS):
        interrupted += killed(["report", big, "-o", page], rng.uniform(0.01, report_seconds))
        with open(page, "rb") as f:
            check(f.read() == finished, f"after kill {k} the report is the earlier whole page")
    check(interrupted >= KILLS // 2, f"most kills landed while report was running ({interrupted} of {KILLS})")

    # ---- compare --html ----
    compared = os.path.join(tmp, "compare.html")
    compare_args = ["compare", reference, model, held, "--no-cache", "-j", "2", "--html", compared]
    r, compare_seconds = timed(compare_args)
    check(r.returncode in (0, 4), f"compare runs (exit {r.returncode}): {r.stderr[-300:]}")
    with open(compared, "rb") as f:
        finished = f.read()
    interrupted = 0
    for k in range(KILLS):
        interrupted += killed(compare_args, rng.uniform(0.05, compare_seconds))
        with open(compared, "rb") as f:
            check(f.read() == finished, f"after kill {k} the comparison page is the earlier whole page")
    check(interrupted >= KILLS // 2, f"most kills landed while compare was running ({interrupted} of {KILLS})")
    for name in leftovers(tmp):
        os.remove(name)

    # ---- no room: a file size limit, as a full disk looks to the program ----
    r = limited(["train", data, "-o", model, "--cache", cache] + train_args, 64)
    check(r.returncode == 1, f"train over the file size limit exits 1 (got {r.returncode})")
    check(f"cannot write {model}: File too large" in r.stderr, f"train names the file and the reason: {r.stderr[-300:]}")
    with open(model) as f:
        check(json.load(f)["linear"] == mine["linear"], "the earlier model is untouched")
    fresh = os.path.join(tmp, "fresh.sqlite")
    r = limited(["train", data, "-o", os.path.join(tmp, "elsewhere.json"), "--cache", fresh] + train_args, 400)
    check("could not be stored in the feature cache" in r.stderr,
          f"a feature cache that cannot grow is said once: {r.stderr[-400:]}")

    small = os.path.join(tmp, "small.jsonl")
    r = limited(["scan", reference, data, "-o", small, "-j", "2"], 8)
    check(r.returncode == 1, f"scan over the file size limit exits 1 (got {r.returncode})")
    check(f"cannot write {small}: File too large" in r.stderr and f"--resume {small}" in r.stderr,
          f"scan names the file, the reason and how to carry on: {r.stderr[-300:]}")
    r = run(["scan", reference, data, "--resume", small, "-j", "2"])
    check(r.returncode == 0 and sorted(g["path"] for g in records(small)) == sorted(truth),
          "--resume after the limit completes the output without loss or duplicate")

    r = limited(["report", big, "-o", page], 64)
    check(r.returncode == 1 and f"cannot write {page}: File too large" in r.stderr,
          f"report over the limit: exit 1 and a clear message: {r.stderr[-300:]}")
    r = limited(compare_args, 4)
    check(r.returncode == 1 and f"cannot write {compared}: File too large" in r.stderr,
          f"compare --html over the limit: exit 1 and a clear message (exit {r.returncode}): {r.stderr[-300:]}")
    with open(page, "rb") as f:
        check(f.read().rstrip().endswith(b"</html>"), "the earlier report is untouched")
    check(leftovers(tmp) == [], f"no temporary file is left behind by a refused write: {leftovers(tmp)}")

finish()
