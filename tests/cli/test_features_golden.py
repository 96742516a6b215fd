"""The feature vector against the one recorded from an earlier build (tests/data/
features_golden.json): speed work must not change what the model sees.

Images: five of scikit-image's sample files as Debian ships them (python3-skimage): RGB and grey
PNGs and a JPEG, so that every family and both decoders take part. Each value must equal the
recorded one to within 1e-9 absolute plus 1e-6 relative (our choice: enough for summation order
and FFT plan changes, far below any change of method; bit-for-bit is reported when it holds).

Usage: test_features_golden.py PATH/TO/residue SAMPLES_DIR [--write]
  --write records the current build's values (do that only when a change of method is intended,
  with the extractor version raised).
"""
import json
import math
import os
import subprocess
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish  # noqa: E402

residue, samples = sys.argv[1], sys.argv[2]
write = "--write" in sys.argv[3:]
golden_path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "data", "features_golden.json")
IMAGES = ["chelsea.png", "camera.png", "coffee.png", "rocket.jpg", "hubble_deep_field.jpg"]
ABSOLUTE, RELATIVE = 1e-9, 1e-6

records = {}
out = subprocess.run([residue, "features"] + [os.path.join(samples, name) for name in IMAGES],
                     capture_output=True, text=True, timeout=600)
check(out.returncode == 0, f"residue features runs on the sample images: {out.stderr[-300:]}")
for line in out.stdout.splitlines():
    record = json.loads(line)
    records[os.path.basename(record["path"])] = {"extractor": record["extractor"], "features": record["features"]}

if write:
    with open(golden_path, "w") as f:
        json.dump({"images": IMAGES, "source": "python3-skimage sample files", "records": records}, f, indent=0)
        f.write("\n")
    print(f"wrote {golden_path}")
    sys.exit(0)

golden = json.load(open(golden_path))["records"]
for name in IMAGES:
    now, then = records.get(name), golden[name]
    check(now is not None and now["extractor"] == then["extractor"], f"{name}: same extractor version")
    if now is None:
        continue
    check(list(now["features"]) == list(then["features"]), f"{name}: the same names in the same order")
    worst, worst_name, identical = 0.0, "", 0
    for key, expected in then["features"].items():
        value = now["features"].get(key, math.nan)
        identical += value == expected
        if expected is None or value is None:  # values a model fills (the coding surprise's gap): null here
            check(value is None and expected is None, f"{name}: {key} is null, as recorded")
            continue
        excess = abs(value - expected) - (ABSOLUTE + RELATIVE * abs(expected))
        if not (excess <= 0):
            check(False, f"{name}: {key} = {value!r}, recorded {expected!r}")
        elif abs(value - expected) > worst:
            worst, worst_name = abs(value - expected), key
    print(f"{name}: {identical} of {len(then['features'])} values bit for bit; largest difference "
          f"{worst:.3g} ({worst_name or 'none'})")
finish()
