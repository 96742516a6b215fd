#!/usr/bin/python3
"""Ablation on the team's development set (reads ../shared/data/dev; copies nothing into the
project): which feature families and which ways of learning earn their cost. Prints the table of
docs/quality.md, "Ablation".

Every configuration is trained four times with `residue train --group-by manifest` (grouped 5-fold
cross-validation, numbers out of fold), as bench/quality.py does: as published and with every
image recompressed to JPEG q85, each grouped by source picture (in-distribution) and with generated
images grouped by generator family (unseen generator). It prints the pooled ROC AUC and the share
of generated images caught at 1 % camera FPR, plus the unseen-generator AUC of stylegan2.

With --camera-model it prints, for each configuration, three rows from the same four models: the
two-class score (as above), the camera-only score alone (out of fold: each fold's camera-only
density fitted on the other folds' camera photos, no generated image), and the larger of the two
scores' ranks among camera photos (provenance "camera_only" of the model).

Usage: bench/ablation.py [--residue build/residue] [--dev ../shared/data/dev]
                         [--work /tmp/residue-quality] [NAME=ARGS ...]
  NAME=ARGS  a configuration: its name and the extra `residue train` arguments, e.g.
             "spectral-only=--only spectral." (default: the table of docs/quality.md)
"""
import argparse
import json
import os
import shlex
import subprocess
import sys
import time

import devset

OLD = ("--only spectral.azimuthal spectral.decay spectral.grid noise.cooc_ noise.spam noise.moments noise.level "
       "noise.cfa resampling.")
PLAIN = " --augment none --instances image"
DEFAULT = [
    ("154 values (before)", OLD + PLAIN),
    ("+ sensor noise level function", OLD + " sensor." + PLAIN),
    ("+ texture contrast", OLD + " texture." + PLAIN),
    ("+ coding cost", OLD + " coding." + PLAIN),
    ("+ 3rd/4th-order co-occurrences", OLD + " noise.cooc3 noise.cooc4" + PLAIN),
    ("+ cross-colour co-occurrences", OLD + " noise.cross" + PLAIN),
    ("+ chroma spectra", OLD + " spectral.chroma" + PLAIN),
    ("all families", PLAIN),
    ("all + augmentation", " --instances image"),
    ("all + augmentation + windows", ""),
]

parser = argparse.ArgumentParser()
parser.add_argument("--residue", default="build/residue")
parser.add_argument("--dev", default="../shared/data/dev")
parser.add_argument("--work", default="/tmp/residue-quality")
parser.add_argument("--camera-model", action="store_true",
                    help="also print the camera-only score and its combination with the two-class score")
parser.add_argument("configs", nargs="*")
args = parser.parse_args()
work = os.path.abspath(args.work)
os.makedirs(work, exist_ok=True)
configs = [tuple(c.split("=", 1)) for c in args.configs] or DEFAULT
items = devset.items(os.path.abspath(args.dev), work)

print(f"{len(items)} images; grouped 5-fold, out of fold; AUC / caught at 1 % camera FPR\n")
print("| configuration | values | in-dist. | in-dist. q85 | unseen | unseen q85 | stylegan2 unseen AUC | train s |")
print("|---|---:|---:|---:|---:|---:|---:|---:|")
def cell(m):
    return f"{m['roc_auc']:.3f} / {m['tpr_at_fpr_1pct']:.2f}"


for name, extra in configs:
    cells = {}
    values = 0
    seconds = 0.0
    for variant in ("as-is", "q85"):
        for grouping in ("in", "unseen"):
            m = devset.manifest(items, work, f"{variant}-{grouping}", variant, grouping)
            model = os.path.join(work, "ablation-model.json")
            cmd = [args.residue, "train", m, "-o", model, "--group-by", "manifest",
                   "--cache", os.path.join(work, "cache.sqlite")] + shlex.split(extra)
            start = time.time()
            run = subprocess.run(cmd, capture_output=True, text=True)
            seconds += time.time() - start
            if run.returncode != 0:
                sys.exit(f"{' '.join(cmd)} failed:\n{run.stderr[-2000:]}")
            with open(model) as f:
                doc = json.load(f)
            values = len(doc["schema"]["features"])
            metrics = doc["provenance"]["cross_validation"]["metrics"]
            camera = doc["provenance"].get("camera_only", {})
            kinds = {"two-class": metrics}
            if "alone" in camera:
                kinds["camera-only"] = camera["alone"]
                kinds["larger rank"] = camera["larger_camera_rank_with_two_class"]
                kinds["likely-camera"] = camera["likely_camera_out_of_fold"]
            for kind, ms in kinds.items():
                cells[(kind, variant, grouping)] = ms
    kinds = ["two-class", "camera-only", "larger rank"] if args.camera_model else ["two-class"]
    for kind in kinds:
        row = [cell(cells[(kind, v, g)]["overall"]) for g in ("in", "unseen") for v in ("as-is", "q85")]
        sg = cells[(kind, "as-is", "unseen")]["per_generator"].get("stylegan2", {}).get("roc_auc")
        label = name if kind == "two-class" else f"{name}: {kind}"
        print(f"| {label} | {values} | " + " | ".join(row) + (f" | {sg:.3f}" if sg is not None else " | –") +
              f" | {seconds:.0f} |", flush=True)
    if args.camera_model:
        for v in ("as-is", "q85"):
            for g in ("in", "unseen"):
                lc = cells.get(("likely-camera", v, g))
                if lc:
                    print(f"  {name} {v} {g}: likely-camera out of fold: {lc['generated']} generated "
                          f"({lc['generated_unusual']} unusual for a camera photo), {lc['camera']} camera "
                          f"({lc['camera_unusual']} unusual)", flush=True)
