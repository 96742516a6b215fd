"""End-to-end test of calibration on held-out camera photos and the camera tail on every record:
calibrate-then-scan equals train-with-calibration; a calibration folder with broken files is still
used (the broken files are listed and counted); one that is too small says so; images the model
trained on are left out; the camera tail of a record is recounted from the model file; scan
orders by it and writes it to CSV; the report has its "review first" table; a model file from
before (no tail) still scores and says why the tail is missing; compare shows the calibration.

Data: small labelled sets from tests/cli/make_labelled.py (scikit-image photo crops and SIMULATED
upsampling output), different seeds for training and calibration.

Usage: test_calibrate_cli.py PATH/TO/residue
"""
import csv
import io
import json
import os
import shutil
import sys
import tempfile

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, make_labelled, runner  # noqa: E402

residue = sys.argv[1]
run = runner(residue)
here = os.path.dirname(os.path.abspath(__file__))


def make(root, seed, count):
    make_labelled(root, seed, count, "jpeg", "png")


def load(path):
    with open(path) as f:
        return json.load(f)


with tempfile.TemporaryDirectory() as tmp:
    cache = ["--cache", os.path.join(tmp, "cache.sqlite")]
    train_root, cal_root, test_root = (os.path.join(tmp, n) for n in ("train", "cal", "test"))
    make(train_root, 1, 30)
    make(cal_root, 2, 40)
    make(test_root, 3, 6)
    shutil.rmtree(os.path.join(cal_root, "generated", "sim-bilinear"))  # fewer generated: faster
    # Broken files in the calibration folder: a truncated JPEG and a text file named .jpg.
    first = sorted(os.listdir(os.path.join(cal_root, "camera")))[0]
    with open(os.path.join(cal_root, "camera", first), "rb") as f:
        head = f.read(600)
    with open(os.path.join(cal_root, "camera", "truncated.jpg"), "wb") as f:
        f.write(head)
    with open(os.path.join(cal_root, "camera", "notes.jpg"), "w") as f:
        f.write("not an image\n")

    model = os.path.join(tmp, "model.json")
    r = run(["train", train_root, "-o", model, "--augment", "none"] + cache)
    check(r.returncode == 0, f"train: {r.stderr[-400:]}")
    m = load(model)
    check(m["calibration_set"]["source"] == "out-of-fold" and len(m["camera_tail"]["margins"]) == 30,
          "a trained model records its out-of-fold calibration and a tail of its 30 camera photos")

    calibrated = os.path.join(tmp, "calibrated.json")
    r = run(["calibrate", model, cal_root, "-o", calibrated] + cache)
    check(r.returncode == 0, f"calibrate: {r.returncode} {r.stderr[-400:]}")
    check("truncated.jpg" in r.stderr and "notes.jpg" in r.stderr, "the broken calibration files are named")
    check("2 calibration files could not be read" in r.stdout, f"and counted: {r.stdout[-600:]}")
    c = load(calibrated)
    cs = c["calibration_set"]
    check(cs["source"] == "held-out" and cs["camera_images"] == 40 and cs["unreadable"] == 2,
          f"the 40 readable camera photos were used: {cs}")
    check(cs["copies"] == 6 * 60, f"full augmentation by default: 6 copies of each of 40 + 20 images ({cs['copies']})")
    check(len(c["camera_tail"]["margins"]) == 40 and c["camera_tail"]["source"] == "held-out camera photos",
          "the tail holds the 40 camera originals, never copies")
    # 40 photos cannot promise 1 %; the promise says what they support and what is needed.
    text = c["thresholds"]["promise"]["text"]
    check(not c["thresholds"]["promise"]["met"] and "What they support" in text and "--target-fpr" in text
          and "more independent camera groups" in text, f"an unmet promise says the three things: {text}")
    check("What they support" in r.stdout, "and calibrate prints it")
    check(c["id"] != m["id"], "a recalibrated model has a new id")
    check(cs["generated_images"] == 20 and cs["likely_camera_calibrated"]
          and c["thresholds"]["likely_camera"] <= c["thresholds"]["likely_generated"],
          "generated calibration images set the likely-camera threshold, never above likely-generated")

    # Two roots: a folder and a CSV manifest of ten more camera photos.
    extra = os.path.join(tmp, "extra")
    make(extra, 4, 10)
    manifest = os.path.join(tmp, "extra.csv")
    with open(manifest, "w") as f:
        f.write("path,label\n")
        for name in sorted(os.listdir(os.path.join(extra, "camera"))):
            f.write(f"{os.path.join(extra, 'camera', name)},camera\n")
    r = run(["calibrate", model, cal_root, manifest, "-o", os.path.join(tmp, "two.json"), "--augment", "none"] + cache)
    two = load(os.path.join(tmp, "two.json")) if r.returncode == 0 else {}
    check(two.get("calibration_set", {}).get("camera_images") == 50 and two["calibration_set"]["copies"] == 0
          and two["calibration_set"]["roots"] == [cal_root, manifest], f"two roots, no copies: {r.stderr[-300:]}")

    # train --calibration does the same at training time: same thresholds and tail.
    both = os.path.join(tmp, "both.json")
    r = run(["train", train_root, "-o", both, "--augment", "none", "--calibration", cal_root] + cache)
    check(r.returncode == 0, f"train --calibration: {r.stderr[-400:]}")
    b = load(both)
    for key in ("likely_generated", "likely_camera"):
        check(b["thresholds"][key] == c["thresholds"][key], f"train --calibration and calibrate agree on {key}")
    check(b["camera_tail"] == c["camera_tail"], "and on the camera tail")
    check(b["calibration_set"]["digest"] == cs["digest"], "and on the calibration images (digest)")

    # Scans of the two models are the same, and each record's tail is the count in the model file.
    r1 = run(["scan", calibrated, test_root])
    r2 = run(["scan", both, test_root])
    check(r1.returncode == 0 and r2.returncode == 0, "scan with both models")
    recs1 = [json.loads(x) for x in r1.stdout.splitlines()]
    recs2 = [json.loads(x) for x in r2.stdout.splitlines()]
    check(len(recs1) == 12, f"12 test images scanned ({len(recs1)})")
    margins = c["camera_tail"]["margins"]
    for a, bb in zip(recs1, recs2):
        check(a["band"] == bb["band"] and a["p_generated"] == bb["p_generated"]
              and a["camera_tail"] == bb["camera_tail"], f"same record from both models: {a['path']}")
        t = a["camera_tail"]
        k = sum(1 for x in margins if x >= a["margin"])
        check(t["camera_photos_at_least"] == k and t["camera_photos"] == 40
              and abs(t["p_value"] - (k + 1) / 41) < 1e-12, f"tail recounted from the model file: {t}")
        check(t["text"].startswith(f"{k} of 40 calibration camera photos"), f"tail in words: {t['text']}")

    # evaluate reports the bands as a scan gives them: the same counts as the scans above.
    r = run(["evaluate", calibrated, test_root, "--json"] + cache)
    bands = json.loads(r.stdout)["bands"] if r.returncode == 0 else {}
    for cls in ("camera", "generated"):
        want = {}
        for rec in recs1:
            if ("/camera/" in rec["path"]) == (cls == "camera"):
                want[rec["band"]] = want.get(rec["band"], 0) + 1
        got = {b: n for b, n in bands.get(cls, {}).items() if n}
        check(got == want, f"evaluate's {cls} bands are the scan's: {got} vs {want}")

    # Too small: five camera photos.
    small = os.path.join(tmp, "small")
    os.makedirs(os.path.join(small, "camera"))
    for name in sorted(os.listdir(os.path.join(cal_root, "camera")))[:5]:
        shutil.copy(os.path.join(cal_root, "camera", name), os.path.join(small, "camera", name))
    r = run(["calibrate", model, small, "-o", os.path.join(tmp, "small.json")] + cache)
    check(r.returncode == 1 and "at least 20" in r.stderr and not os.path.exists(os.path.join(tmp, "small.json")),
          f"too few calibration photos: refused with the reason ({r.returncode}, {r.stderr[-300:]})")

    # The training images themselves are left out of calibration.
    r = run(["calibrate", model, train_root, "-o", os.path.join(tmp, "self.json")] + cache)
    check(r.returncode == 1 and "among the model's training images and were left out" in r.stderr,
          f"calibrating on the training images: left out, then too few ({r.stderr[-300:]})")

    # scan --order camera-tail and CSV.
    r = run(["scan", calibrated, test_root, "--order", "camera-tail"])
    ordered = [json.loads(x)["camera_tail"]["p_value"] for x in r.stdout.splitlines()]
    check(r.returncode == 0 and ordered == sorted(ordered) and len(ordered) == 12, "scan --order camera-tail")
    r = run(["scan", calibrated, test_root, "--format", "csv"])
    rows = list(csv.DictReader(io.StringIO(r.stdout)))
    check(len(rows) == 12 and all(row["camera_tail_p_value"] and row["camera_photos"] == "40" for row in rows),
          "CSV carries the camera tail")
    r = run(["scan", calibrated, test_root, "--order", "camera-tail", "--resume", os.path.join(tmp, "x.jsonl")])
    check(r.returncode == 2, "--order camera-tail with --resume is a usage error")

    # The report's review-first table.
    scan_out = os.path.join(tmp, "scan.jsonl")
    with open(scan_out, "w") as f:
        f.write(r1.stdout)
    page = os.path.join(tmp, "report.html")
    r = run(["report", scan_out, "-o", page])
    with open(page) as f:
        html = f.read()
    check(r.returncode == 0 and "Review first" in html and "held-out camera photos (40)" in html,
          "the report has the review-first table")
    section = html[html.index("Review first"):]
    rarest = min(recs1, key=lambda x: (x["camera_tail"]["p_value"], -x["p_generated"]))
    first_row = section[section.index("<td><code>") + len("<td><code>"):]
    check(first_row.startswith(rarest["path"]), "its first row is the rarest record")

    # A model file from before: no tail, and the record says why.
    old = dict(m)
    del old["camera_tail"]
    del old["calibration_set"]
    old_path = os.path.join(tmp, "old.json")
    with open(old_path, "w") as f:
        json.dump(old, f)
    r = run(["scan", old_path, os.path.join(test_root, "camera")])
    rec = json.loads(r.stdout.splitlines()[0])
    check(r.returncode == 0 and rec["camera_tail"] is None and "calibrate" in rec["camera_tail_note"],
          "an old model still scores; the record says why there is no camera tail")

    # compare shows both models' calibration.
    r = run(["compare", model, calibrated, test_root, "--json"] + cache)
    j = json.loads(r.stdout) if r.returncode in (0, 4) else {}
    check(j.get("calibration", {}).get("new", {}).get("source") == "held-out"
          and j["calibration"]["old"]["source"] == "out-of-fold", f"compare shows the calibration ({r.returncode})")

finish()
