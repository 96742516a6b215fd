#!/usr/bin/python3
"""Quality benchmark on the team's development set (reads ../shared/data/dev; copies nothing
into the project). Prints the tables of docs/quality.md.

What it does:
  1. Cuts the sample grids in grids/ into their cells where the manifest gives the layout (strips
     and grids of equal tiles; collages and padded grids are left out) and writes the cells,
     losslessly as PNG, under a scratch folder (default /tmp/residue-quality).
  2. Writes CSV manifests (path,label,generator,group) for two groupings:
       in-distribution  groups = one source picture (a grid's cells stay together; camera sets
                        that share scenes, LIVE1 + Kodak24 and Set5/Set14 + OpenCV's samples,
                        are one group each; DreamBooth objects one group per object)
       unseen-generator groups for generated images = their generator family, so every fold
                        tests generators its model never saw
  3. Repeats everything with every image recompressed to JPEG quality 85 (Pillow), so a model
     cannot tell the classes apart by container or compression.
  4. Trains with `residue train --group-by manifest` (grouped 5-fold cross-validation) with all
     features and with the 1-D azimuthal spectrum alone (Durall et al. 2020 baseline,
     `--only spectral.azimuthal`), and reads the out-of-fold metrics from the model files.

Usage: bench/quality.py [--residue build/residue] [--dev ../shared/data/dev] [--work /tmp/residue-quality]
"""
import argparse
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
dev = os.path.abspath(args.dev)
work = os.path.abspath(args.work)
os.makedirs(work, exist_ok=True)

items = devset.items(dev, work)


results = {}
for variant in ("as-is", "q85"):
    for grouping in ("in", "unseen"):
        m = devset.manifest(items, work, f"{variant}-{grouping}", variant, grouping)
        for features in ("all", "baseline"):
            model = os.path.join(work, f"model-{variant}-{grouping}-{features}.json")
            cmd = [args.residue, "train", m, "-o", model, "--group-by", "manifest",
                   "--cache", os.path.join(work, "cache.sqlite")]
            if features == "baseline":
                cmd += ["--only", "spectral.azimuthal"]
            run = subprocess.run(cmd, capture_output=True, text=True)
            if run.returncode != 0:
                sys.exit(f"{' '.join(cmd)} failed:\n{run.stderr[-2000:]}")
            with open(model) as f:
                results[(variant, grouping, features)] = json.load(f)["provenance"]

print(f"{len(items)} images: {sum(1 for i in items if i[1] == 'camera')} camera, "
      f"{sum(1 for i in items if i[1] == 'generated')} generated (grid cells included)\n")
for variant in ("as-is", "q85"):
    for grouping in ("in", "unseen"):
        title = {"in": "in-distribution (grouped by source picture)",
                 "unseen": "unseen generator (generated images grouped by family)"}[grouping]
        a = results[(variant, grouping, "all")]["cross_validation"]
        b = results[(variant, grouping, "baseline")]["cross_validation"]
        print(f"### {'as published' if variant == 'as-is' else 'all recompressed to JPEG q85'}, {title}\n")
        print(f"C chosen: {a['chosen_c']} (all features), {b['chosen_c']} (baseline); "
              f"{a['groups']} groups, {a['folds']} folds\n")
        print("| generator | camera | generated | AUC | TPR@1%FPR | ECE | baseline AUC | baseline TPR@1% |")
        print("|---|---:|---:|---:|---:|---:|---:|---:|")
        rows_a = dict(a["metrics"]["per_generator"])
        rows_a["**all**"] = a["metrics"]["overall"]
        rows_b = dict(b["metrics"]["per_generator"])
        rows_b["**all**"] = b["metrics"]["overall"]
        for gen, ma in rows_a.items():
            mb = rows_b[gen]
            print(f"| {gen} | {ma['camera']} | {ma['generated']} | {ma['roc_auc']:.3f} | {ma['tpr_at_fpr_1pct']:.3f} "
                  f"| {ma['ece']:.3f} | {mb['roc_auc']:.3f} | {mb['tpr_at_fpr_1pct']:.3f} |")
        print()
