#!/usr/bin/python3
"""Retraining on a new generator, measured on the development set: does the retrained model
catch the new generator and still the others, and does drift notice recompression?

Needs the manifests bench/quality.py writes (default /tmp/residue-quality/as-is-in.csv and
q85-in.csv: path,label,generator,group). Steps:
  1. Splits the source groups (a grid's cells, one scene set, one object stay together) into
     training (about 70 %) and held-back (30 %) by a hash of the group name.
  2. OLD: trained on the training part without the NEW generator's images (--group-by manifest).
  3. NEW: `residue train --from OLD` on the whole training part (the generator "appears").
  4. `residue compare OLD NEW` on the held-back part, as published and recompressed (JPEG q85),
     drawing the source groups whole in the bootstrap.
  5. `residue drift NEW` on scan records of the held-back part as published, and recompressed.

Usage: bench/retrain_quality.py [--residue build/residue] [--work /tmp/residue-quality] [--new hunyuan-dit]
"""
import argparse
import csv
import hashlib
import json
import os
import subprocess

parser = argparse.ArgumentParser()
parser.add_argument("--residue", default="build/residue")
parser.add_argument("--work", default="/tmp/residue-quality")
parser.add_argument("--new", default="hunyuan-dit")
args = parser.parse_args()
work = os.path.abspath(args.work)
out = os.path.join(work, "retrain")
os.makedirs(out, exist_ok=True)
cache = os.path.join(work, "cache.sqlite")


def rows_of(name):
    with open(os.path.join(work, name + ".csv")) as f:
        return list(csv.DictReader(f))


def held(group):
    return int(hashlib.sha256(group.encode()).hexdigest(), 16) % 10 < 3


def write(name, rows):
    path = os.path.join(out, name + ".csv")
    with open(path, "w", newline="") as f:
        w = csv.DictWriter(f, fieldnames=["path", "label", "generator", "group"])
        w.writeheader()
        w.writerows(rows)
    return path


def residue(*a):
    return subprocess.run([args.residue] + list(a), capture_output=True, text=True)


as_is, q85 = rows_of("as-is-in"), rows_of("q85-in")
train = [r for r in as_is if not held(r["group"])]
old_csv = write("old-train", [r for r in train if r["generator"] != args.new])
new_csv = write("new-train", train)
held_csv = write("held", [r for r in as_is if held(r["group"])])
held_q85_csv = write("held-q85", [r for r in q85 if held(r["group"])])
count = lambda rows, g: sum(1 for r in rows if r["generator"] == g)  # noqa: E731
print(f"training: {len(train)} images ({count(train, args.new)} of {args.new}); held back: "
      f"{sum(1 for r in as_is if held(r['group']))} ({sum(1 for r in as_is if held(r['group']) and r['generator'] == args.new)} of {args.new})")

old, new = os.path.join(out, "old.json"), os.path.join(out, "new.json")
for model, csv_path, extra in ((old, old_csv, []), (new, new_csv, ["--from", old])):
    r = residue("train", csv_path, "-o", model, "--cache", cache, "--group-by", "manifest", *extra)
    if r.returncode != 0:
        raise SystemExit(r.stderr[-2000:])
with open(new) as f:
    print("lineage:", json.dumps(json.load(f)["provenance"]["lineage"]["added"]))

for label, data in (("as published", held_csv), ("recompressed JPEG q85", held_q85_csv)):
    # The bootstrap draws the manifest's source groups whole (a grid's cells are not independent).
    r = residue("compare", old, new, data, "--cache", cache, "--json", "--group-by", "manifest")
    c = json.loads(r.stdout)
    print(f"\ncompare OLD NEW on the held-back part, {label}: exit {r.returncode}, new_no_worse={c['new_no_worse']}, "
          f"{c['noise_margin']['units']} bootstrap units")
    print("| row | images (groups) | ROC AUC OLD → NEW | TPR OLD → NEW | FPR OLD → NEW | verdict |")
    print("|---|---:|---|---|---|---|")
    for row in c["rows"]:
        m = row["metrics"]
        cell = lambda k: (f"{m[k]['old']:.3f} → {m[k]['new']:.3f} [{m[k]['interval'][0]:+.2f}, {m[k]['interval'][1]:+.2f}]"  # noqa: E731
                          if k in m else "–")
        print(f"| {row['row']} | {row['images']} ({row['units']}) | {cell('roc_auc')} | {cell('tpr')} | {cell('fpr')} | {row['verdict']} |")
    for n in c["notes"]:
        print("note:", n)

for label, data in (("as published", held_csv), ("recompressed JPEG q85", held_q85_csv)):
    with open(data) as f:
        paths = "".join(row["path"] + "\n" for row in csv.DictReader(f))
    records = os.path.join(out, "scan-" + ("q85" if "q85" in data else "as-is") + ".jsonl")
    subprocess.run([args.residue, "scan", new, "-", "-o", records], input=paths, capture_output=True, text=True)
    r = residue("drift", new, records, "--json")
    d = json.loads(r.stdout)
    rows = ", ".join(f"{row['summary']} {row['psi']:.2f}" for row in d["psi"])
    print(f"\ndrift NEW on the held-back part, {label}: verdict {d['verdict']} (exit {r.returncode}); "
          f"noise floor {d['psi'][0]['noise_floor']:.2f}; PSI: {rows}")
