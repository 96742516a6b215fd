#!/usr/bin/python3
"""A camera-only model on the development set, end to end through the command line (reads
../shared/data/dev in place; copies nothing into the project). Prints the table of
docs/quality.md, "Coding surprise and the camera-only score".

For each of two splits of the camera photos' source groups (halves by a hash of the group name,
then the halves swapped): `residue train --camera-only` on one half's camera photos (no generated
image anywhere), then `residue evaluate --json` on the other half's camera photos and every
generated image. As published and with every image recompressed to JPEG q85 (Pillow). Prints the
ROC AUC, the share of generated images above 99 % of the held-out camera photos, and what the band
did: camera photos in likely-generated (people wrongly suspected) and generated images caught.

Usage: bench/camera_only.py [--residue build/residue] [--dev ../shared/data/dev]
                            [--work /tmp/residue-quality]
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
parser.add_argument("--work", default="/tmp/residue-quality")
args = parser.parse_args()
work = os.path.abspath(args.work)
os.makedirs(work, exist_ok=True)
items = devset.items(os.path.abspath(args.dev), work)
cache = os.path.join(work, "cache.sqlite")


def half(group):
    return int(hashlib.sha256(group.encode()).hexdigest(), 16) % 2


def write(path, rows):
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["path", "label", "generator", "group"])
        w.writerows(rows)
    return path


print("| split | variant | camera photos trained | held-out camera | generated | AUC | generated above 99 % of "
      "camera | camera in likely-generated | generated caught | stylegan2 AUC |")
print("|---|---|---:|---:|---:|---:|---:|---:|---:|---:|")
for variant in ("as-is", "q85"):
    for train_half in (0, 1):
        def path_of(p):
            return devset.recompressed(p, work) if variant == "q85" else p
        train_rows = [(path_of(p), "camera", "camera", g) for p, label, gen, g, _ in items
                      if label == "camera" and half(g) == train_half]
        test_rows = [(path_of(p), label, gen, g) for p, label, gen, g, _ in items
                     if label == "generated" or half(g) != train_half]
        train_csv = write(os.path.join(work, f"camera-only-train-{variant}-{train_half}.csv"), train_rows)
        test_csv = write(os.path.join(work, f"camera-only-test-{variant}-{train_half}.csv"), test_rows)
        model = os.path.join(work, "camera-only-model.json")
        run = subprocess.run([args.residue, "train", train_csv, "-o", model, "--group-by", "manifest",
                              "--camera-only", "--cache", cache], capture_output=True, text=True)
        if run.returncode != 0:
            sys.exit(f"train failed:\n{run.stderr[-2000:]}")
        ev = subprocess.run([args.residue, "evaluate", model, test_csv, "--json", "--cache", cache],
                            capture_output=True, text=True)
        if ev.returncode != 0:
            sys.exit(f"evaluate failed:\n{ev.stderr[-2000:]}")
        doc = json.loads(ev.stdout)
        o = doc["metrics"]["overall"]
        bands = doc["bands"]
        camera, generated = o["camera"], o["generated"]
        flagged = bands["camera"].get("likely-generated", 0)
        caught = bands["generated"].get("likely-generated", 0)
        sg = doc["metrics"]["per_generator"].get("stylegan2", {}).get("roc_auc")
        print(f"| {train_half} | {variant} | {len(train_rows)} | {camera} | {generated} | {o['roc_auc']:.3f} | "
              f"{o['tpr_at_fpr_1pct']:.2f} | {flagged} of {camera} | {caught} of {generated} | "
              f"{sg if sg is None else round(sg, 3)} |", flush=True)
