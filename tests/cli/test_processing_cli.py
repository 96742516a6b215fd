"""End-to-end test of the scores that know their limits: a camera photograph saved as a palette
PNG or as lossy WebP — processing the training folders never showed — is never put in
likely-generated and the record says why; the model promises its threshold with a
Clopper-Pearson bound; `evaluate --processing` reports per transform; an older model file without
an applicability reference still scores, with in_domain null.

Data: a small labelled set from tests/cli/make_labelled.py (scikit-image photo crops and
SIMULATED upsampling output) and scikit-image's astronaut photograph (public domain).

Usage: test_processing_cli.py PATH/TO/residue
"""
import json
import os
import subprocess
import sys
import tempfile

import skimage.data as data
from PIL import Image

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import FAMILIES, check, finish, runner  # noqa: E402

residue = sys.argv[1]
run = runner(residue)
here = os.path.dirname(os.path.abspath(__file__))


def scan_one(model, path):
    r = run(["scan", model, path])
    check(r.returncode == 0, f"scan {path}: exit {r.returncode} {r.stderr[-300:]}")
    return json.loads(r.stdout.splitlines()[0])


with tempfile.TemporaryDirectory() as tmp:
    train = os.path.join(tmp, "train")
    subprocess.run(["/usr/bin/python3", os.path.join(here, "make_labelled.py"), train, "1", "jpeg", "jpeg", "30"],
                   check=True)
    model = os.path.join(tmp, "model.json")
    trained = run(["train", train, "-o", model, "--cache", os.path.join(tmp, "cache.sqlite")])
    check(trained.returncode == 0, f"train: {trained.stderr[-300:]}")
    check("Promise of likely-generated:" in trained.stdout, "train states what likely-generated promises")
    with open(model) as f:
        m = json.load(f)
    promise = m["thresholds"].get("promise", {})
    # The promise counts the augmented copies (6 per image with the default --augment full) as
    # camera images, and the 30 photos as its groups.
    check(promise.get("camera_images") == 210 and promise.get("camera_groups") == 30
          and promise.get("confidence") == 0.95, f"promise recorded: {promise}")
    # 30 camera images cannot promise 1 % at 95 %: ceil(ln 0.05 / ln 0.99) = 299 groups are needed.
    check(promise.get("met") is False and promise.get("groups_needed", 0) >= 299 - 30,
          f"too few camera images: the model says how many more are needed ({promise})")
    check("applicability" in m and len(m["applicability"]["families"]) == len(FAMILIES), "applicability reference stored")

    photo = Image.fromarray(data.astronaut()).crop((40, 40, 440, 440))
    palette = os.path.join(tmp, "astronaut-palette.png")
    photo.quantize(256).save(palette)
    webp = os.path.join(tmp, "astronaut.webp")
    photo.save(webp, "WEBP", quality=80)
    plain = os.path.join(tmp, "astronaut.jpg")
    photo.save(plain, "JPEG", quality=90)

    r = scan_one(model, palette)
    check(r["band"] != "likely-generated", f"palette PNG camera photo not likely-generated (got {r['band']})")
    check(r["band"] == "inconclusive" and any("palette" in x for x in r["reasons"]),
          f"palette PNG: inconclusive with a reason ({r['reasons']})")
    check(r["processing"]["quantised"] and r["processing"]["palette_file"], "palette PNG: processing says so")
    check(isinstance(r["p_generated"], float), "the probability is still reported")

    r = scan_one(model, webp)
    check(r["band"] != "likely-generated", f"lossy WebP camera photo not likely-generated (got {r['band']})")
    check(r["band"] == "inconclusive" and any("WebP" in x for x in r["reasons"]),
          f"lossy WebP: inconclusive with a reason ({r['reasons']})")
    check(r["processing"]["lossy_webp"], "WebP: processing says lossy")

    r = scan_one(model, plain)
    check(isinstance(r["in_domain"], bool), "in_domain is true or false for a model with a reference")
    check(set(r["applicability"]["distance"]) == FAMILIES, "distances per family")
    check(r["band"] != "inconclusive" or len(r["reasons"]) > 0, "an inconclusive record always says why")

    # evaluate --processing on held-out simulated data.
    held = os.path.join(tmp, "held")
    subprocess.run(["/usr/bin/python3", os.path.join(here, "make_labelled.py"), held, "9", "jpeg", "jpeg", "8"],
                   check=True)
    ev = run(["evaluate", model, held, "--no-cache", "--processing", "--transforms", "jpeg-q50,palette-256,webp-q80",
              "--json"])
    check(ev.returncode == 0, f"evaluate --processing: {ev.stderr[-300:]}")
    rows = json.loads(ev.stdout)["processing"] if ev.returncode == 0 else []
    check([x["transform"] for x in rows] == ["jpeg-q50", "palette-256", "webp-q80"], "one row per transform")
    for x in rows:
        check(x["camera"] == 8 and x["generated"] == 8, f"{x['transform']}: every image scored")
    pal = [x for x in rows if x["transform"] == "palette-256"]
    check(pal and pal[0]["camera_likely_generated"] == 0 and pal[0]["camera_guarded"] == 1.0,
          f"palette copies of camera photos: none flagged, all guarded ({pal})")
    text = run(["evaluate", model, held, "--no-cache", "--processing", "--transforms", "webp-q80"])
    check("camera→likely-gen" in text.stdout and "webp-q80" in text.stdout and "Advisory" in text.stdout,
          "the processing table is printed with the advisory")
    bad = run(["evaluate", model, held, "--no-cache", "--processing", "--transforms", "sepia"])
    check(bad.returncode == 2 and "unknown transform" in bad.stderr, "an unknown transform is a usage error")

    # A model file from before the applicability reference: still loads and scores.
    del m["applicability"]
    del m["thresholds"]["promise"]
    old = os.path.join(tmp, "old.json")
    with open(old, "w") as f:
        json.dump(m, f)
    r = scan_one(old, plain)
    check(r["in_domain"] is None and "note" in r["applicability"], "old model: in_domain null, stated")
    check(r["band"] in ("likely-camera", "inconclusive", "likely-generated"), "old model: still scores")
    ev = run(["evaluate", old, held, "--no-cache"])
    check(ev.returncode == 0 and "without a confidence bound" in ev.stdout, "old model: evaluate says no bound")

finish()
