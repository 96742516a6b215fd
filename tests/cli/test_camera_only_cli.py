"""End to end: a camera-only model (train on camera photos alone), the camera-only view on every
record of a two-class model, the coding-surprise map of `explain`, models of extractor 2.0.0
still scoring as they did (with a note), and older ones refused with a clear message.

Data: tests/cli/make_labelled.py (scikit-image photo crops and SIMULATED generator output).
Usage: test_camera_only_cli.py PATH/TO/residue
"""
import json
import os
import shutil
import sys
import tempfile

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, make_labelled, runner  # noqa: E402

from sklearn.metrics import roc_auc_score  # noqa: E402  (Debian python3-sklearn)

run = runner(sys.argv[1])
work = tempfile.mkdtemp(prefix="residue-camera-only-")
try:
    labelled = os.path.join(work, "labelled")
    make_labelled(labelled, 21, 40)
    camera_root = os.path.join(work, "camera-only")
    shutil.copytree(os.path.join(labelled, "camera"), os.path.join(camera_root, "camera"))
    cache = os.path.join(work, "cache.sqlite")

    # 1. A root with camera photos and no generated folder trains a camera-only model.
    model = os.path.join(work, "camera-only.json")
    out = run(["train", camera_root, "-o", model, "--cache", cache, "--augment", "none"])
    check(out.returncode == 0, f"train on camera photos alone succeeds: {out.stderr[-400:]}")
    check("training a camera-only model" in out.stdout, "train says it trains a camera-only model")
    check("No generated image was seen" in out.stdout, "train says no generator was seen")
    doc = json.load(open(model))
    check(doc["kind"] == "camera-only", "the model file says camera-only")
    check(doc["thresholds"]["likely_camera"] == 0.0, "a camera-only model has no likely-camera band")
    check(doc["provenance"]["counts"]["generated"] == 0, "provenance: no generated image")
    check("camera_pixels" in doc and "camera_only" in doc, "the camera pixel model and the density are stored")

    # 2. Scanning a second set (other crops, other seed): generated images it never saw rank above
    #    camera photos it never saw, and no record says likely-camera.
    unseen = os.path.join(work, "unseen")
    make_labelled(unseen, 22, 40)
    scan = run(["scan", model, os.path.join(unseen, "camera"), os.path.join(unseen, "generated")])
    check(scan.returncode == 0, f"scan with the camera-only model: {scan.stderr[-300:]}")
    records = [json.loads(line) for line in scan.stdout.splitlines()]
    check(len(records) == 80, f"80 records ({len(records)})")
    check(all(r["band"] != "likely-camera" for r in records), "no record is likely-camera")
    check(all(r["camera_only"] and "note" in r["camera_only"] for r in records),
          "every record carries the camera-only view and its note")
    check(all(r["p_generated"] < 1.0 for r in records), "p_generated keeps the order (never rounds to 1)")
    y = [0 if "/camera/" in r["path"] else 1 for r in records]
    auc = roc_auc_score(y, [r["p_generated"] for r in records])
    print(f"camera-only model on unseen camera crops and unseen simulated output: AUC {auc:.3f}")
    check(auc > 0.8, f"the camera-only model ranks unseen simulated output above camera photos (AUC {auc:.3f})")

    # 3. --camera-only with generated images given is refused, saying why.
    refused = run(["train", labelled, "-o", os.path.join(work, "x.json"), "--cache", cache, "--augment",
                   "none", "--camera-only"])
    check(refused.returncode == 1 and "camera photos only" in refused.stderr,
          f"--camera-only with generated images is refused: {refused.stderr[-300:]}")
    check(not os.path.exists(os.path.join(work, "x.json")), "no model written when refused")

    # 4. A two-class model carries the camera-only view on every record and prints its summary.
    two = os.path.join(work, "two-class.json")
    out = run(["train", labelled, "-o", two, "--cache", cache, "--augment", "none"])
    check(out.returncode == 0, f"two-class train: {out.stderr[-300:]}")
    check("Camera-only score (fitted on camera photos alone, out of fold)" in out.stdout,
          "two-class train reports the camera-only score out of fold")
    doc = json.load(open(two))
    check(doc["kind"] == "two-class" and "alone" in doc["provenance"]["camera_only"],
          "the two-class model records the camera-only score's out-of-fold metrics")
    scan = run(["scan", two, os.path.join(labelled, "generated")])
    records = [json.loads(line) for line in scan.stdout.splitlines()]
    keys = {"score", "unusual", "density", "family_distance", "gap_bits_per_pixel", "window_gap_spread",
            "window_gap_max", "camera_tail"}
    check(all(keys <= set(r["camera_only"]) for r in records), "two-class records carry the camera-only view")
    check(all("note" not in r["camera_only"] for r in records), "no camera-only note on a two-class model")
    check(all(r["camera_only"]["window_gap_spread"] >= 0 for r in records), "window gap spread is not negative")

    # 5. explain draws the coding-surprise map.
    image = os.path.join(labelled, "generated", sorted(os.listdir(os.path.join(labelled, "generated")))[0])
    image = os.path.join(image, sorted(os.listdir(image))[0])
    out_dir = os.path.join(work, "explain")
    ex = run(["explain", two, image, "-o", out_dir])
    check(ex.returncode == 0, f"explain: {ex.stderr[-300:]}")
    check(os.path.getsize(os.path.join(out_dir, "coding_surprise.png")) > 1000, "coding_surprise.png is written")
    check("coding_surprise.png" in json.load(open(os.path.join(out_dir, "summary.json")))["pictures"],
          "summary.json lists the map")
    ex = run(["explain", model, image, "-o", os.path.join(work, "explain-camera-only")])
    check(ex.returncode == 0 and "Values furthest from camera photos" in ex.stdout,
          f"explain of a camera-only model lists the values furthest from camera photos: {ex.stderr[-200:]}")

    # 6. A model of extractor 2.0.0 (whose 887 values 3.0.0 keeps bit for bit) still loads and scores
    #    exactly as before, with a note on every record; an older one is refused, naming both versions.
    before = os.path.join(work, "before.json")
    out = run(["train", labelled, "-o", before, "--cache", cache, "--augment", "none", "--only", "spectral.",
               "noise.", "resampling.", "sensor.", "texture.", "coding."])
    check(out.returncode == 0, f"train on the 887 values of 2.0.0: {out.stderr[-300:]}")
    old = json.load(open(before))
    for key in ("camera_pixels", "camera_only", "kind"):
        old.pop(key, None)
    old["schema"]["extractor_version"] = "2.0.0"
    old["schema"]["schema_id"] = "0123456789abcdef"
    old_path = os.path.join(work, "old.json")
    json.dump(old, open(old_path, "w"))
    now = run(["scan", before, image])
    then = run(["scan", old_path, image])
    check(then.returncode == 0, f"a 2.0.0 model loads: {then.stderr[-300:]}")
    if then.returncode == 0:
        a, b = json.loads(now.stdout), json.loads(then.stdout)
        check(a["p_generated"] == b["p_generated"] and a["margin"] == b["margin"],
              "a 2.0.0 model scores exactly as the same model under 3.0.0")
        check("2.0.0" in b.get("model_note", "") and "retrain" in b["model_note"] and b["camera_only"] is None,
              "its records say what it lacks")
    old["schema"]["extractor_version"] = "1.0.0"
    json.dump(old, open(old_path, "w"))
    refused = run(["scan", old_path, image])
    check(refused.returncode != 0 and "1.0.0" in refused.stderr and "3.0.0" in refused.stderr and
          "retrain" in refused.stderr, f"an extractor-1.0.0 model is refused clearly: {refused.stderr[-300:]}")
finally:
    shutil.rmtree(work, ignore_errors=True)
finish()
