#!/usr/bin/python3
"""Everyday processing on the development set (reads ../shared/data/dev in place; copies nothing
into the project). Prints the tables of docs/quality.md, "Everyday processing".

What it does:
  1. Takes the development set as bench/quality.py does (grid cells included) and splits its
     source groups (a grid's cells, a scene set, an object) into three folds, so that no picture
     and none of its relatives is on both sides.
  2. For each fold: trains `residue train --group-by manifest` on the other two folds, processes
     every held-out image with each everyday transform — done here with Pillow, an implementation
     independent of residue's own (`residue evaluate --processing`) — and scans the processed
     copies with `residue scan`.
  3. Per transform, over the three held-out folds: camera photos put in likely-generated, camera
     photos made inconclusive (and how many of them by the applicability check or processing the
     training never showed, "guarded"), generated images still caught, generated images made
     inconclusive, ROC AUC of p_generated, the camera photos at or above the likely-generated
     threshold if the guards were ignored (what the guards alone prevent), and each class in
     likely-camera (generated images there are fakes waved through; the band allows 5 %).
     Transforms: the everyday ones and the laundering ones of bench/devset.py.
  4. As published, per fold: the band's TPR and camera FPR against the ranking's TPR at that FPR
     and at 1 % camera FPR (what the band catches against what the ranking allows).
With --old OTHER_RESIDUE it repeats everything with another build (e.g. the previous release) for
a before/after table; an older build has no guards, so its guarded share reads 0.

Usage: bench/processing_quality.py [--residue build/residue] [--old PATH] [--dev ../shared/data/dev]
                                   [--work /tmp/residue-processing] [--jobs 2] [--tag NAME]
                                   [--train-args ARGS] [--transforms NAME...] [--cache FILE]
"""
import argparse
import csv
import hashlib
import json
import os
import shlex
import subprocess
import sys

import devset

parser = argparse.ArgumentParser()
parser.add_argument("--residue", default="build/residue")
parser.add_argument("--old", default=None)
parser.add_argument("--dev", default="../shared/data/dev")
parser.add_argument("--work", default="/tmp/residue-processing")
parser.add_argument("--jobs", default="2")
parser.add_argument("--folds", type=int, default=3)
parser.add_argument("--fold", type=int, default=None,
                    help="evaluate this fold only (a grouped held-back split of about 1/FOLDS)")
parser.add_argument("--tag", default="new", help="name of this build's files under --work (default new)")
parser.add_argument("--train-args", default="", help="extra `residue train` arguments, e.g. \"--only spectral.\"")
parser.add_argument("--transforms", nargs="*", default=None, help="only these transforms (default: all)")
parser.add_argument("--cache", default=None, help="feature cache (default WORK/TAG-cache.sqlite)")
args = parser.parse_args()
dev = os.path.abspath(args.dev)
work = os.path.abspath(args.work)
os.makedirs(work, exist_ok=True)
items = devset.items(dev, os.path.join(work, "set"))


TRANSFORMS = {k: v for k, v in devset.TRANSFORMS.items() if args.transforms is None or k in args.transforms}


def processed(path, name):
    return devset.processed(path, name, work)


def fold_of(group):
    return int(hashlib.sha256(group.encode()).hexdigest(), 16) % args.folds


def run(cmd):
    r = subprocess.run(cmd, capture_output=True, text=True)
    if r.returncode not in (0, 3):
        sys.exit(f"{' '.join(cmd)} failed ({r.returncode}):\n{r.stderr[-3000:]}")
    return r


def auc(pos, neg):
    """Mann-Whitney ROC AUC with ties counted half."""
    if not pos or not neg:
        return float("nan")
    ranked = sorted([(p, 1) for p in pos] + [(p, 0) for p in neg])
    rank_sum, i = 0.0, 0
    while i < len(ranked):
        j = i
        while j < len(ranked) and ranked[j][0] == ranked[i][0]:
            j += 1
        mean_rank = (i + j + 1) / 2
        rank_sum += mean_rank * sum(1 for k in range(i, j) if ranked[k][1] == 1)
        i = j
    return (rank_sum - len(pos) * (len(pos) + 1) / 2) / (len(pos) * len(neg))


def evaluate(binary, tag):
    records = {name: [] for name in TRANSFORMS}
    promises = []
    for f in ([args.fold] if args.fold is not None else range(args.folds)):
        train = [it for it in items if fold_of(it[3]) != f]
        test = [it for it in items if fold_of(it[3]) == f]
        manifest = os.path.join(work, f"{tag}-train-{f}.csv")
        with open(manifest, "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(["path", "label", "generator", "group"])
            for p, label, gen, group, _ in train:
                w.writerow([p, label, gen, group])
        model = os.path.join(work, f"{tag}-model-{f}.json")
        if not os.path.exists(model):  # a finished fold is reused when the script runs again
            run([binary, "train", manifest, "-o", model, "--group-by", "manifest", "--jobs", args.jobs,
                 "--cache", args.cache or os.path.join(work, f"{tag}-cache.sqlite")] + shlex.split(args.train_args))
        with open(model) as fh:
            promises.append(json.load(fh)["thresholds"])
        threshold = promises[-1]["likely_generated"]
        for name in TRANSFORMS:
            paths = [processed(p, name) for p, *_ in test]
            truth = {pp: it for pp, it in zip(paths, test)}
            out = os.path.join(work, f"{tag}-scan-{f}-{name}.jsonl")
            if not os.path.exists(out):
                listing = os.path.join(work, "paths.txt")
                with open(listing, "w") as fh:
                    fh.write("\n".join(paths) + "\n")
                with open(listing) as stdin:
                    r = subprocess.run([binary, "scan", model, "-", "-o", out + ".part", "--jobs", args.jobs],
                                       stdin=stdin, capture_output=True, text=True)
                if r.returncode not in (0, 3):
                    sys.exit(f"scan failed: {r.stderr[-2000:]}")
                os.replace(out + ".part", out)
            with open(out) as fh:
                for line in fh:
                    rec = json.loads(line)
                    rec["truth"] = truth[rec["path"]][1]
                    rec["threshold"] = threshold
                    rec["fold"] = f
                    records[name].append(rec)
    return records, promises


def table(records):
    rows = []
    for name, recs in records.items():
        ok = [r for r in recs if "error" not in r]
        cam = [r for r in ok if r["truth"] == "camera"]
        gen = [r for r in ok if r["truth"] == "generated"]

        def share(rs, pred):
            return sum(1 for r in rs if pred(r)) / len(rs) if rs else float("nan")

        def guarded(r):
            return r["band"] == "inconclusive" and any(not s.startswith("the score") for s in r.get("reasons", []))

        rows.append((name, len(cam), len(gen), len(recs) - len(ok),
                     share(cam, lambda r: r["band"] == "likely-generated"),
                     share(cam, lambda r: r["band"] == "inconclusive"), share(cam, guarded),
                     share(gen, lambda r: r["band"] == "likely-generated"),
                     share(gen, lambda r: r["band"] == "inconclusive"), share(gen, guarded),
                     share(cam, lambda r: r["p_generated"] >= r["threshold"]),
                     share(cam, lambda r: r["band"] == "likely-camera"),
                     share(gen, lambda r: r["band"] == "likely-camera"),
                     auc([r["p_generated"] for r in gen], [r["p_generated"] for r in cam])))
    return rows


def band_against_ranking(recs):
    """As published, per fold and pooled: the band's TPR and camera FPR, the ranking's TPR at that
    camera FPR (flagging above the (k+1)-th highest camera score) and at 1 % camera FPR."""
    totals = [0, 0, 0, 0, 0, 0]  # band caught, band flagged camera, ranking at that FPR, at 1 %, generated, camera
    for f in sorted({r["fold"] for r in recs}):
        ok = [r for r in recs if r["fold"] == f and "error" not in r]
        cam = sorted((r["p_generated"] for r in ok if r["truth"] == "camera"), reverse=True)
        gen = [r["p_generated"] for r in ok if r["truth"] == "generated"]
        caught = sum(1 for r in ok if r["truth"] == "generated" and r["band"] == "likely-generated")
        flagged = sum(1 for r in ok if r["truth"] == "camera" and r["band"] == "likely-generated")
        above = lambda k: sum(1 for p in gen if p > (cam[k] if k < len(cam) else -1.0))
        row = [caught, flagged, above(flagged), above(int(0.01 * len(cam))), len(gen), len(cam)]
        print(f"fold {f}: band TPR {pct(row[0] / row[4])} at camera FPR {pct(row[1] / row[5])}; ranking TPR at that "
              f"FPR {pct(row[2] / row[4])}, at 1 % camera FPR {pct(row[3] / row[4])}")
        totals = [a + b for a, b in zip(totals, row)]
    print(f"all folds: band TPR {pct(totals[0] / totals[4])} at camera FPR {pct(totals[1] / totals[5])}; ranking TPR "
          f"at that FPR {pct(totals[2] / totals[4])}, at 1 % camera FPR {pct(totals[3] / totals[4])}\n")


def pct(v):
    return f"{100 * v:.1f} %"


def print_table(title, rows):
    print(f"### {title}\n")
    print("| transform | camera | generated | camera → likely-generated | camera inconclusive (guarded) "
          "| generated caught | generated inconclusive (guarded) | camera at or above the threshold, guards ignored "
          "| camera → likely-camera | generated → likely-camera | AUC |")
    print("|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    for name, nc, ng, failed, flagged, inc, g_c, caught, ginc, g_g, unguarded, cam_pass, gen_pass, a in rows:
        bold = "**" if flagged > 0.02 else ""
        print(f"| {name} | {nc} | {ng} | {bold}{pct(flagged)}{bold} | {pct(inc)} ({pct(g_c)}) | {pct(caught)} "
              f"| {pct(ginc)} ({pct(g_g)}) | {pct(unguarded)} | {pct(cam_pass)} "
              f"| {'**' if gen_pass > 0.05 else ''}{pct(gen_pass)}{'**' if gen_pass > 0.05 else ''} | {a:.3f} |" + (f" {failed} failed" if failed else ""))
    print()


print(f"{len(items)} images ({sum(1 for i in items if i[1] == 'camera')} camera), {args.folds} grouped folds"
      + (f", fold {args.fold} held back" if args.fold is not None else "") + "\n")
builds = [(args.tag, args.residue)] + ([("old", args.old)] if args.old else [])
for tag, binary in builds:
    records, promises = evaluate(binary, tag)
    for f, t in enumerate(promises):
        p = t.get("promise")
        print(f"fold {f}: likely-generated threshold {t['likely_generated']:.4f}"
              + (f"; {p['text']}" if p else " (no promise recorded)"))
    print()
    print_table(f"{tag}: {binary}", table(records))
    band_against_ranking(records["as-published"])
