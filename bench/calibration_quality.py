#!/usr/bin/python3
"""Calibration on held-out camera photos, measured on the development set (reads ../shared/data/dev
in place; copies nothing into the project). Prints the tables of docs/quality.md, "Calibration on
camera photos the model never trained on".

Design (grouped throughout: a source picture, scene set or object is one group, as bench/quality.py):
  1. Groups are split by a hash of their name: a training pool T (25 % of the camera groups, 55 %
     of the generated groups) and the rest R. One model M is trained on T (`residue train`, the
     default settings). R's generated images are the test generated images.
  2. R's camera groups are cut into K = 6 folds. Cross-fitting: for each fold r, the camera photos
     of the other five folds are the calibration set (`residue calibrate M`) and fold r's camera
     photos the test camera photos; so every camera photo of R is tested exactly once, by a
     threshold that never saw it. Smaller calibration sets (50, 100, 200 groups) are drawn from
     the five folds, a different draw for each fold (hash of group and fold).
  3. Every test image is scanned once with M (`residue scan`); its band under a calibrated model is
     read from its p and its guards (the guards do not depend on the thresholds). One calibrated
     model per size is also scanned directly, and the bench stops if its bands differ from that
     reading.
  4. Per calibration size, without and with processed copies of the calibration photos
     (`--augment none`, `light`, `full`): the threshold, the promise, the band's camera FPR on the test camera
     photos, its TPR on the test generated images, the ranking's TPR at the same camera FPR and at
     1 % test camera FPR (p alone, no threshold); the out-of-fold threshold of `train` for
     comparison. Then the test camera photos after each everyday transform of
     bench/processing_quality.py: how many land in likely-generated under each calibration.

Usage: bench/calibration_quality.py [--residue build/residue] [--dev ../shared/data/dev]
                                    [--work /tmp/residue-calibration] [--jobs 2] [--no-processing]
"""
import argparse
import csv
import hashlib
import json
import os
import subprocess
import sys

import devset

parser = argparse.ArgumentParser()
parser.add_argument("--residue", default="build/residue")
parser.add_argument("--dev", default="../shared/data/dev")
parser.add_argument("--work", default="/tmp/residue-calibration")
parser.add_argument("--jobs", default="2")
parser.add_argument("--no-processing", action="store_true")
args = parser.parse_args()
dev = os.path.abspath(args.dev)
work = os.path.abspath(args.work)
os.makedirs(work, exist_ok=True)
cache = os.path.join(work, "cache.sqlite")
items = devset.items(dev, os.path.join(work, "set"))
K = 6
SIZES = [50, 100, 200, None]  # None: all five other folds


def h(text):
    return int(hashlib.sha256(text.encode()).hexdigest(), 16)


def run(cmd, **kw):
    r = subprocess.run(cmd, capture_output=True, text=True, **kw)
    if r.returncode not in (0, 3):
        sys.exit(f"{' '.join(cmd)} failed ({r.returncode}):\n{r.stderr[-3000:]}{r.stdout[-2000:]}")
    return r


def write_manifest(path, rows):
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["path", "label", "generator", "group"])
        for p, label, gen, group, _ in rows:
            w.writerow([p, label, gen, group])


def scan(model, paths, out):
    if not os.path.exists(out):
        listing = out + ".paths"
        with open(listing, "w") as fh:
            fh.write("\n".join(paths) + "\n")
        with open(listing) as stdin:
            run([args.residue, "scan", model, "-", "-o", out + ".part", "--jobs", args.jobs], stdin=stdin)
        os.replace(out + ".part", out)
    with open(out) as fh:
        return {r["path"]: r for r in map(json.loads, fh)}


def guarded(r):
    return any(not s.startswith("the score") for s in r.get("reasons", []))


def band(r, t_gen, t_cam):
    if guarded(r):
        return "inconclusive"
    return "likely-generated" if r["p_generated"] >= t_gen else ("likely-camera" if r["p_generated"] < t_cam
                                                                 else "inconclusive")


def ranking_tpr(cam_p, gen_p, fpr):
    """TPR of p alone (no guards) when flagging strictly above the camera score that keeps the test
    camera FPR at or below `fpr`."""
    cam = sorted(cam_p, reverse=True)
    allowed = int(fpr * len(cam) + 1e-9)
    if allowed >= len(cam):
        return 1.0
    return sum(1 for p in gen_p if p > cam[allowed]) / len(gen_p)


def pct(v):
    return f"{100 * v:.1f} %"


camera_groups = sorted({it[3] for it in items if it[1] == "camera"}, key=h)
generated_groups = {it[3] for it in items if it[1] == "generated"}
train_camera = set(camera_groups[: len(camera_groups) // 4])
train_generated = {g for g in generated_groups if h(g) % 100 < 55}
rest_camera = [g for g in camera_groups if g not in train_camera]
fold_of = {g: i % K for i, g in enumerate(rest_camera)}
train = [it for it in items if it[3] in train_camera or it[3] in train_generated]
test_generated = [it for it in items if it[1] == "generated" and it[3] not in train_generated]
rest = [it for it in items if it[1] == "camera" and it[3] in fold_of]

model = os.path.join(work, "model.json")
if not os.path.exists(model):
    write_manifest(os.path.join(work, "train.csv"), train)
    run([args.residue, "train", os.path.join(work, "train.csv"), "-o", model, "--group-by", "manifest",
         "--jobs", args.jobs, "--cache", cache])
with open(model) as fh:
    m = json.load(fh)
print(f"{len(items)} images; training pool: {sum(1 for i in train if i[1] == 'camera')} camera photos in "
      f"{len(train_camera)} groups, {sum(1 for i in train if i[1] == 'generated')} generated; held out: "
      f"{len(rest)} camera photos in {len(rest_camera)} groups ({K} folds), {len(test_generated)} generated "
      f"images in {len(generated_groups - train_generated)} groups.")
print(f"Model {m['id']}: out-of-fold threshold p >= {m['thresholds']['likely_generated']:.4f}; "
      f"{m['thresholds']['promise']['text']}\n")

records = scan(model, [it[0] for it in rest + test_generated], os.path.join(work, "scan-as-published.jsonl"))
cam_p = [records[it[0]]["p_generated"] for it in rest]
gen_p = [records[it[0]]["p_generated"] for it in test_generated]
rank_at_1 = ranking_tpr(cam_p, gen_p, 0.01)


def calibrated(fold, size, augment):
    """Calibrates M on the camera groups of the other folds (the first `size` in hash order)."""
    groups = sorted((g for g in rest_camera if fold_of[g] != fold), key=lambda g: h(f"{g}/{fold}"))[:size]
    keep = set(groups)
    tag = f"cal-{fold}-{size or 'all'}-{augment}"
    out = os.path.join(work, tag + ".json")
    if not os.path.exists(out):
        write_manifest(os.path.join(work, tag + ".csv"), [it for it in rest if it[3] in keep])
        run([args.residue, "calibrate", model, os.path.join(work, tag + ".csv"), "-o", out, "--group-by",
             "manifest", "--cache", cache, "--augment", augment, "--jobs", args.jobs])
    with open(out) as fh:
        return json.load(fh)


def outcome(recs, models):
    """Camera FPR and generated TPR of the band, over the folds (each camera photo by its fold's model)."""
    flagged = sum(1 for it in rest if band(recs[it[0]], *models[fold_of[it[3]]]) == "likely-generated")
    caught = [sum(1 for it in test_generated if band(recs[it[0]], *t) == "likely-generated") / len(test_generated)
              for t in models]
    camera_in_camera_band = sum(1 for it in rest if band(recs[it[0]], *models[fold_of[it[3]]]) == "likely-camera")
    fake_in_camera_band = [sum(1 for it in test_generated if band(recs[it[0]], *t) == "likely-camera")
                           / len(test_generated) for t in models]
    return (flagged / len(rest), sum(caught) / len(caught), min(caught), max(caught),
            camera_in_camera_band / len(rest), sum(fake_in_camera_band) / len(fake_in_camera_band))


rows = []
thresholds = {}
AUGMENTS = ("none", "light", "full")
for augment in AUGMENTS:
    for size in SIZES:
        cals = [calibrated(f, size, augment) for f in range(K)]
        thresholds[(size, augment)] = [(c["thresholds"]["likely_generated"], c["thresholds"]["likely_camera"])
                                       for c in cals]
        met = sum(1 for c in cals if c["thresholds"]["promise"]["met"])
        bounds = [c["thresholds"]["promise"]["fpr_upper_bound"] for c in cals]
        groups = [c["calibration_set"]["camera_groups"] for c in cals]
        images = [c["calibration_set"]["camera_images"] for c in cals]
        fpr, tpr, tpr_lo, tpr_hi, cam_cam, gen_cam = outcome(records, thresholds[(size, augment)])
        rows.append((augment, size, min(groups), max(groups), min(images), max(images),
                     [t for t, _ in thresholds[(size, augment)]], met, min(bounds), max(bounds), fpr, tpr, tpr_lo,
                     tpr_hi, ranking_tpr(cam_p, gen_p, fpr), gen_cam))
        # The bands read from p and guards must be those a scan with the calibrated model gives.
        if augment == "none" and size in (None, 50):
            tag = f"cal-0-{size or 'all'}-none"
            fold0 = [it for it in rest if fold_of[it[3]] == 0] + test_generated
            direct = scan(os.path.join(work, tag + ".json"), [it[0] for it in fold0],
                          os.path.join(work, f"scan-{tag}.jsonl"))
            for it in fold0:
                want = band(records[it[0]], *thresholds[(size, augment)][0])
                if direct[it[0]]["band"] != want:
                    sys.exit(f"band mismatch for {it[0]}: scan {direct[it[0]]['band']}, bench {want}")

oof = m["thresholds"]["likely_generated"], m["thresholds"]["likely_camera"]
fpr, tpr, *_rest, gen_cam = outcome(records, [oof] * K)
print("### Held-out calibration against the training's out-of-fold threshold\n")
print("| calibration | copies | camera groups (images) | likely-generated threshold (6 folds) | promise met "
      "| 95 % bound | test camera FPR in the band | generated caught (fold range) | ranking's TPR at that FPR "
      "| generated in likely-camera |")
print("|---|---|---:|---|---:|---:|---:|---:|---:|---:|")
print(f"| out of fold (train) | in threshold | {m['thresholds']['promise']['camera_groups']} "
      f"({m['thresholds']['promise']['camera_images']} with copies) | {oof[0]:.4f} | "
      f"{'yes' if m['thresholds']['promise']['met'] else 'no'} | {pct(m['thresholds']['promise']['fpr_upper_bound'])} "
      f"| {pct(fpr)} | {pct(tpr)} | {pct(ranking_tpr(cam_p, gen_p, fpr))} | {pct(gen_cam)} |")
for augment, size, g0, g1, i0, i1, ts, met, b0, b1, fpr, tpr, lo, hi, rank, gen_cam in rows:
    print(f"| {size or 'all other folds'} groups | {augment} | {g0}–{g1} ({i0}–{i1}) "
          f"| {min(ts):.4f}–{max(ts):.4f} | {met} of {K} | {pct(b0)}–{pct(b1)} | {pct(fpr)} | {pct(tpr)} "
          f"({pct(lo)}–{pct(hi)}) | {pct(rank)} | {pct(gen_cam)} |")
print(f"\nThe ranking alone (p, no threshold) catches {pct(rank_at_1)} of the test generated images at 1 % "
      f"test camera FPR ({len(rest)} test camera photos); 0.7 x that is {pct(0.7 * rank_at_1)}.\n")

if not args.no_processing:
    print("### Test camera photos after everyday processing: share put in likely-generated\n")
    keys = [(s, a) for a in AUGMENTS for s in (200, None)]
    print("| transform | out of fold | " + " | ".join(f"{s or 'all'} groups, copies {a}" for s, a in keys)
          + " | generated caught: copies none / light / full (all groups) "
          + "| generated in likely-camera: out of fold / all groups, copies full |")
    print("|---|" + "---:|" * (len(keys) + 3))
    for name in devset.TRANSFORMS:
        paths = {it[0]: devset.processed(it[0], name, work) for it in rest + test_generated}
        recs = scan(model, list(paths.values()), os.path.join(work, f"scan-{name}.jsonl"))
        recs = {p: recs[q] for p, q in paths.items()}
        cells = [pct(outcome(recs, [oof] * K)[0])] + [pct(outcome(recs, thresholds[k])[0]) for k in keys]
        caught = " / ".join(pct(outcome(recs, thresholds[(None, a)])[1]) for a in AUGMENTS)
        waved = f"{pct(outcome(recs, [oof] * K)[5])} / {pct(outcome(recs, thresholds[(None, 'full')])[5])}"
        print(f"| {name} | " + " | ".join(cells) + f" | {caught} | {waved} |")
