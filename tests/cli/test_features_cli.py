"""End-to-end test of `residue features` as a user runs it: a folder with good and broken files.

Usage: test_features_cli.py PATH/TO/residue. Images are made here with Pillow (Debian
python3-pil) from scikit-image's sample photographs; the broken files are labelled by name.
"""
import json
import os
import subprocess
import sys
import tempfile

import numpy as np
import skimage.data as data
from PIL import Image

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, runner  # noqa: E402

residue = sys.argv[1]
run = runner(residue)




with tempfile.TemporaryDirectory() as tmp:
    folder = os.path.join(tmp, "batch")
    os.makedirs(os.path.join(folder, "sub"))
    Image.fromarray(data.coffee()).save(os.path.join(folder, "a_coffee.jpg"), quality=90)
    Image.fromarray(data.astronaut()).save(os.path.join(folder, "sub", "b_astronaut.png"))
    with open(os.path.join(folder, "a_coffee.jpg"), "rb") as f:
        jpeg = f.read()
    with open(os.path.join(folder, "c_truncated.jpg"), "wb") as f:
        f.write(jpeg[: len(jpeg) // 3])
    open(os.path.join(folder, "d_empty.png"), "wb").close()
    with open(os.path.join(folder, "e_notes.txt"), "w") as f:
        f.write("not an image\n")
    Image.fromarray(np.zeros((20, 20, 3), np.uint8)).save(os.path.join(folder, "f_tiny.png"))

    result = run(["features", "--jobs", "2", folder])
    check(result.returncode == 3, f"exit 3 when some inputs fail, got {result.returncode}: {result.stderr}")
    records = [json.loads(line) for line in result.stdout.splitlines()]
    check(len(records) == 6, f"one record per input, got {len(records)}")
    by_name = {os.path.basename(r["path"]): r for r in records}
    expected_errors = {"c_truncated.jpg": "truncated", "d_empty.png": "empty",
                       "e_notes.txt": "not-an-image", "f_tiny.png": "too-small"}
    for name, code in expected_errors.items():
        got = by_name.get(name, {}).get("error", {}).get("code")
        check(got == code, f"{name}: error code {code}, got {got}")
        check(bool(by_name.get(name, {}).get("error", {}).get("message")), f"{name}: error message present")
    names = None
    for name in ("a_coffee.jpg", "b_astronaut.png"):
        r = by_name.get(name, {})
        check("error" not in r, f"{name} extracted")
        for field in ("format", "width", "height", "channels", "windows", "extractor", "features",
                      "compression_history", "timings_ms"):
            check(field in r, f"{name} has field {field}")
        if names is None:
            names = list(r.get("features", {}))
        check(list(r.get("features", {})) == names, f"{name} has the same feature names in the same order")
        values = r.get("features", {})
    check(all(np.isfinite(v) for v in values.values() if v is not None), f"{name} values finite")
    # Only the coding surprise's model values (NLL, expected cost, gap) are null: no model fills them.
    check(all(k.startswith("surprise.") and not k.startswith("surprise.stats.") for k, v in values.items()
              if v is None), f"{name}: only model values are null")
    check(by_name["a_coffee.jpg"]["compression_history"]["jpeg_quality"] == 90, "JPEG quality 90 estimated")
    check(by_name["b_astronaut.png"]["compression_history"]["jpeg_quality"] is None, "PNG has no JPEG quality")
    paths = [r["path"] for r in records]
    check(paths == sorted(paths), "records in sorted path order")

    # The same through -o (written atomically) and through paths on stdin.
    out = os.path.join(tmp, "features.jsonl")
    result = run(["features", "-o", out, "-"], stdin=os.path.join(folder, "a_coffee.jpg") + "\n")
    check(result.returncode == 0, f"exit 0 when every input succeeds, got {result.returncode}")
    with open(out) as f:
        lines = f.read().splitlines()
    check(len(lines) == 1 and json.loads(lines[0])["features"] == by_name["a_coffee.jpg"]["features"],
          "stdin path list and -o give the same values as the folder run")
    check(not [p for p in os.listdir(tmp) if ".tmp-" in p], "no temporary file left behind")

    # Usage errors exit 2; --help exits 0.
    check(run(["features"]).returncode == 2, "missing inputs is a usage error (2)")
    check(run(["features", "--no-such-flag", folder]).returncode == 2, "unknown flag is a usage error (2)")
    check(run(["features", "--help"]).returncode == 0, "--help exits 0")
    check(run(["features", "--max-pixels", "1000", os.path.join(folder, "a_coffee.jpg")]).returncode == 3,
          "pixel limit from the command line refuses the image")

finish()
