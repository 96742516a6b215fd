"""End-to-end test of audit, train and evaluate as a user runs them, on a small labelled set of
scikit-image photo crops and SIMULATED generator output (tests/cli/make_labelled.py).

The training set plants a container confound (camera all JPEG, generated all PNG); the audit
must say so. A second set flips the containers (camera PNG, generated JPEG): a model that learned
upsampling traces keeps its ranking there, one that learned the container would not.

Usage: test_train_cli.py PATH/TO/residue
"""
import json
import os
import re
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, runner  # noqa: E402

residue = sys.argv[1]
run = runner(residue)
here = os.path.dirname(os.path.abspath(__file__))




def make(root, seed, camera_format, generated_format, count):
    subprocess.run(["/usr/bin/python3", os.path.join(here, "make_labelled.py"), root, str(seed), camera_format,
                    generated_format, str(count)], check=True)


with tempfile.TemporaryDirectory() as tmp:
    train, flip = os.path.join(tmp, "train"), os.path.join(tmp, "flip")
    make(train, 1, "jpeg", "png", 40)
    make(flip, 2, "png", "jpeg", 30)
    with open(os.path.join(train, "camera", "broken.jpg"), "wb") as f:
        f.write(b"\xff\xd8\xff\xe0 truncated")  # a JPEG signature and nothing else
    cache = os.path.join(tmp, "cache.sqlite")
    model = os.path.join(tmp, "model.json")

    audit = run(["audit", train, "--cache", cache])
    check(audit.returncode == 0, f"audit exits 0, got {audit.returncode}: {audit.stderr}")
    check("Container confound" in audit.stdout, "audit names the planted container confound")
    check(run(["audit", train, "--cache", cache, "--strict"]).returncode == 1, "audit --strict exits 1 on a warning")
    audit_json = json.loads(run(["audit", train, "--cache", cache, "--json"]).stdout)
    check(audit_json["camera"]["formats"] == {"jpeg": 40}, "audit JSON counts camera formats")
    check(audit_json["generated"]["count"] == 40, "audit JSON counts generated images")

    strict = run(["train", train, "-o", model, "--cache", cache, "--strict"])
    check(strict.returncode == 1 and not os.path.exists(model), "train --strict refuses and writes nothing")

    trained = run(["train", train, "-o", model, "--cache", cache])
    check(trained.returncode == 0, f"train exits 0, got {trained.returncode}: {trained.stderr[-500:]}")
    check("out-of-fold ROC AUC" in trained.stdout, "train prints the cross-validated metrics")
    check("0 extracted, 80 from the feature cache" in trained.stderr, "train reuses the cache filled by audit")
    check("skipped" in trained.stderr and "broken.jpg" in trained.stderr, "an unreadable file is reported and skipped")
    check("Advisory:" in trained.stdout, "train prints the advisory notice")
    with open(model) as f:
        m = json.load(f)
    check(m["format"] == "residue-model" and m["format_version"] == 1, "model file names its format")
    check(re.fullmatch(r"m-[0-9a-f]{16}", m["id"]) is not None, "model id is a content fingerprint")
    check(len(m["schema"]["features"]) == len(m["linear"]["weights"]) == len(m["scaler"]["mean"]),
          "schema, weights and scaler align")
    check(any("Container confound" in w for w in m["provenance"]["audit_warnings"]), "audit warnings stored in model")
    cv = m["provenance"]["cross_validation"]["metrics"]["overall"]
    check(cv["roc_auc"] >= 0.95, f"cross-validated AUC on simulated upsampling >= 0.95, got {cv['roc_auc']}")
    check(0.0 <= cv["ece"] <= 0.15, f"cross-validated ECE in range, got {cv['ece']}")
    check(m["provenance"]["counts"]["per_generator"] == {"sim-bilinear": 20, "sim-tconv": 20}, "counts per generator")
    check(0 < m["thresholds"]["likely_camera"] <= m["thresholds"]["likely_generated"] <= 1, "thresholds ordered")
    settings = m["provenance"]["settings"]
    check(settings["augment"] == "full" and settings["instances"] == "image", f"defaults recorded: {settings}")
    check(m["learning"]["instances"] == "image", f"image-level learning recorded: {m['learning']}")
    check(m["provenance"]["counts"]["augmented_copies"] == 6 * 80, "six augmented copies per image")
    check("480 augmented copies (full, " in strict.stderr + trained.stderr, f"train reports the copies: {trained.stderr[-300:]}")
    check("480 augmented copies (full, 480 extracted)" in strict.stderr, "the first run extracts the copies")
    again = run(["train", train, "-o", os.path.join(tmp, "again.json"), "--cache", cache])
    check("480 augmented copies (full, 0 extracted)" in again.stderr, "copies come from the cache the second time")
    plain = run(["train", train, "-o", os.path.join(tmp, "plain.json"), "--cache", cache, "--augment", "none"])
    with open(os.path.join(tmp, "plain.json")) as f:
        p = json.load(f)
    check(plain.returncode == 0 and p["provenance"]["counts"]["augmented_copies"] == 0, "--augment none trains without copies")
    windowed = run(["train", train, "-o", os.path.join(tmp, "windows.json"), "--cache", cache, "--instances", "windows"])
    with open(os.path.join(tmp, "windows.json")) as f:
        w = json.load(f)
    check(windowed.returncode == 0 and w["learning"]["instances"] == "windows"
          and w["learning"]["pooling"] in ("mean", "top-third"), f"--instances windows: pooling recorded {w['learning']}")
    check("of its windows' margins" in windowed.stdout, "train says how windows are pooled")
    scanned = run(["scan", os.path.join(tmp, "windows.json"), os.path.join(flip, "camera")])
    check(scanned.returncode == 0 and scanned.stdout.count("p_generated") >= 10, "a window-level model scans")
    check(run(["train", train, "-o", os.path.join(tmp, "x.json"), "--augment", "heavy"]).returncode == 2,
          "an unknown augmentation is a usage error")

    page = os.path.join(tmp, "evaluation.html")
    evaluated = run(["evaluate", model, flip, "--cache", cache, "--json", "--html", page])
    check(evaluated.returncode == 0, f"evaluate exits 0, got {evaluated.returncode}: {evaluated.stderr[-500:]}")
    result = json.loads(evaluated.stdout)
    flipped_auc = result["metrics"]["overall"]["roc_auc"]
    check(flipped_auc >= 0.9, f"ranking survives flipped containers (traces, not format): AUC {flipped_auc}")
    check(set(result["metrics"]["per_generator"]) == {"sim-bilinear", "sim-tconv"}, "per-generator rows")
    shifted = json.loads(run(["evaluate", model, flip, "--cache", cache, "--json", "--prior", "0.01"]).stdout)
    check(shifted["metrics"]["overall"]["roc_auc"] == flipped_auc, "a prior shift keeps the ranking (monotone)")
    check(shifted["metrics"]["overall"]["brier"] != result["metrics"]["overall"]["brier"], "a prior shift moves P")
    check("advisory" in result, "JSON carries the advisory notice")
    with open(page) as f:
        html = f.read()
    check(html.count("<svg") == 2, "page draws the ROC curve and the reliability diagram")
    check("must never be the sole basis" in html, "page carries the advisory notice")
    external = re.findall(r"(?:src|href)\s*=|<link|@import|url\(", html)
    check(not external, f"page has no external references: {external}")

    m["schema"]["extractor_version"] = "0.0.0"
    old = os.path.join(tmp, "old.json")
    with open(old, "w") as f:
        json.dump(m, f)
    refused = run(["evaluate", old, flip, "--cache", cache])
    check(refused.returncode == 1 and "retrain" in refused.stderr, "a model from another extractor is refused")
    check(run(["train", os.path.join(tmp, "nowhere"), "-o", model]).returncode == 1, "missing ROOT fails cleanly")

finish()
