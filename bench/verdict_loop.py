#!/usr/bin/python3
"""Reviewers' verdicts flowing back, measured on the development set (read in place, never copied):
a generator family the model never saw, a few of its images judged by a reviewer through the
service, the model retrained with those verdicts, and the family's *other* images scored before and
after.

Steps:
  1. Source groups (bench/devset.py: a grid's cells, one scene set, one object stay together) are
     split by a hash of the group name: about 30 % held back for evaluation.
  2. OLD: `residue train` on the rest, without any image of FAMILY (--group-by manifest).
  3. FAMILY's images are split by group into a verdict pool and an evaluation part.
  4. For K in 5, 10, 20: `residue serve OLD --verdicts STORE`; each of K pool images is scored
     (POST /v1/score, as a moderation queue would) and then judged "generated" with the generator's
     name by hash (POST /v1/verdicts, JSON); the service is stopped; NEW_K = `residue train TRAIN
     --from OLD --verdicts STORE`.
  5. `residue evaluate` of OLD and each NEW_K on the held-back camera photos plus FAMILY's
     evaluation part: the family's ROC AUC, TPR at 1 % camera FPR (the ranking), share in
     likely-generated (the band), and camera photos in likely-generated; and on the held-back
     camera photos plus the other families' held-back images (nothing else got worse).

Usage: bench/verdict_loop.py [--residue build/residue] [--dev ../shared/data/dev]
                             [--work /tmp/residue-verdicts] [--family latent-diffusion] [--augment light]
"""
import argparse
import csv
import hashlib
import json
import os
import socket
import subprocess
import sys
import time
import urllib.request

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import devset  # noqa: E402

parser = argparse.ArgumentParser()
parser.add_argument("--residue", default="build/residue")
parser.add_argument("--dev", default="../shared/data/dev")
parser.add_argument("--work", default="/tmp/residue-verdicts")
parser.add_argument("--family", default="latent-diffusion")
parser.add_argument("--augment", default="light", help="train's --augment for OLD (NEW inherits it)")
parser.add_argument("--counts", default="5,10,20")
args = parser.parse_args()
residue = os.path.abspath(args.residue)
work = os.path.abspath(args.work)
os.makedirs(work, exist_ok=True)
cache = os.path.join(work, "cache.sqlite")
counts = [int(k) for k in args.counts.split(",")]


def hashed(text, salt=""):
    return int(hashlib.sha256((salt + text).encode()).hexdigest(), 16)


def write(name, rows):
    path = os.path.join(work, name + ".csv")
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["path", "label", "generator", "group"])
        w.writerows(rows)
    return path


def run(*a, **kw):
    r = subprocess.run([residue] + list(a), capture_output=True, text=True, **kw)
    if r.returncode not in (0, 3, 4):
        raise SystemExit(f"residue {' '.join(a)}: exit {r.returncode}\n{r.stderr[-3000:]}")
    return r


items = devset.items(os.path.abspath(args.dev), work)
held = lambda g: hashed(g) % 10 < 3  # noqa: E731
family = [it for it in items if it[2] == args.family]
train = [it for it in items if it[2] != args.family and not held(it[3])]
held_camera = [it for it in items if it[1] == "camera" and held(it[3])]
held_other = [it for it in items if it[1] == "generated" and it[2] != args.family and held(it[3])]
# The family's groups in a fixed pseudo-random order: the first ones give the verdicts, the rest
# are evaluated (a group never on both sides).
groups = sorted({it[3] for it in family}, key=lambda g: hashed(g, "verdict"))
pool, rest, taken = [], [], set()
for g in groups:
    members = [it for it in family if it[3] == g]
    if len(pool) < max(counts):
        pool += members
        taken.add(g)
    else:
        rest += members
pool = pool[:max(counts)]
row = lambda it: [it[0], it[1], it[2], it[3]]  # noqa: E731
train_csv = write("train", [row(it) for it in train])
eval_family = write("eval-family", [row(it) for it in held_camera + rest])
eval_other = write("eval-other", [row(it) for it in held_camera + held_other])
print(f"{args.family}: {len(family)} images in {len(groups)} groups; verdict pool {len(pool)}, evaluated {len(rest)}")
print(f"training {len(train)} images; held back {len(held_camera)} camera photos, {len(held_other)} other generated")

old = os.path.join(work, "old.json")
t0 = time.time()
run("train", train_csv, "-o", old, "--cache", cache, "--group-by", "manifest", "--augment", args.augment)
print(f"OLD trained in {time.time() - t0:.0f} s")


def free_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


def post(url, data, content_type):
    req = urllib.request.Request(url, data=data, headers={"Content-Type": content_type})
    try:
        with urllib.request.urlopen(req, timeout=60) as r:
            return r.status, json.loads(r.read())
    except urllib.error.HTTPError as e:
        return e.code, json.loads(e.read())


def give_verdicts(k):
    store = os.path.join(work, f"verdicts-{k}.sqlite")
    for suffix in ("", "-wal", "-shm"):
        if os.path.exists(store + suffix):
            os.remove(store + suffix)
    port = free_port()
    server = subprocess.Popen([residue, "serve", old, "--port", str(port), "--verdicts", store],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    base = f"http://127.0.0.1:{port}"
    for _ in range(100):
        try:
            urllib.request.urlopen(base + "/v1/health", timeout=1)
            break
        except OSError:
            time.sleep(0.1)
    bands = {}
    try:
        for it in pool[:k]:
            with open(it[0], "rb") as f:
                status, record = post(base + "/v1/score", f.read(), "application/octet-stream")
            assert status == 200, record
            bands[record["band"]] = bands.get(record["band"], 0) + 1
            body = json.dumps({"sha256": record["sha256"], "verdict": "generated", "generator": args.family,
                               "reviewer": "bench-reviewer"}).encode()
            status, answer = post(base + "/v1/verdicts", body, "application/json")
            assert status == 201, answer
    finally:
        server.terminate()
        server.wait()
    return store, bands


def measured(model):
    out = {}
    for name, data in (("family", eval_family), ("other", eval_other)):
        r = run("evaluate", model, data, "--cache", cache, "--json")
        out[name] = json.loads(r.stdout)
    return out


def summary(m):
    fam = m["family"]["metrics"]["per_generator"].get(args.family, {})
    bands = m["family"]["bands"]
    n_gen = sum(bands["generated"].values())
    n_cam = sum(bands["camera"].values())
    other = m["other"]["metrics"]["overall"]
    other_cam = m["other"]["bands"]["camera"]
    return {
        "auc": fam.get("roc_auc"),
        "tpr1": fam.get("tpr_at_fpr_1pct"),
        "caught": bands["generated"].get("likely-generated", 0) / n_gen,
        "camera_in_lg": bands["camera"].get("likely-generated", 0),
        "cameras": n_cam,
        "other_auc": other["roc_auc"],
        "other_tpr1": other["tpr_at_fpr_1pct"],
        "other_camera_in_lg": other_cam.get("likely-generated", 0),
    }


rows = [("OLD (never saw " + args.family + ")", 0, summary(measured(old)), None)]
for k in counts:
    store, bands = give_verdicts(k)
    new = os.path.join(work, f"new-{k}.json")
    t0 = time.time()
    r = run("train", train_csv, "--from", old, "--verdicts", store, "-o", new, "--cache", cache)
    seconds = time.time() - t0
    added = json.load(open(new))["provenance"]["verdicts"]["images_added"]
    rows.append((f"NEW with {k} verdicts", added, summary(measured(new)), (bands, seconds)))

print(f"\n| model | verdicts used | {args.family} AUC | TPR at 1 % FPR | in likely-generated | camera photos in "
      "likely-generated | other families AUC | other TPR at 1 % | note |")
print("|---|---:|---:|---:|---:|---:|---:|---:|---|")
for name, added, s, extra in rows:
    note = "" if extra is None else (f"OLD's bands on the judged images: {extra[0]}; retrained in {extra[1]:.0f} s")
    print(f"| {name} | {added} | {s['auc']:.3f} | {s['tpr1']:.3f} | {100 * s['caught']:.1f} % | "
          f"{s['camera_in_lg']} of {s['cameras']} | {s['other_auc']:.3f} | {s['other_tpr1']:.3f} | {note} |")
