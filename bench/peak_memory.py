#!/usr/bin/python3
"""Peak memory of scoring one image, by format and size: `residue scan` (the worker takes the same
path) and `residue serve` (one POST), for 1, 12, 64 and 120 megapixel PNG, JPEG, WebP and TIFF.

Images are SIMULATED, made here with numpy and Pillow (Debian python3-numpy, python3-pil): a colour
gradient with Gaussian noise (sigma 2), so that files compress like a clean photograph rather than
like pure noise. PNG at zlib level 1, JPEG q90, WebP q80, TIFF with Deflate (an uncompressed 120 MP
TIFF, 360 MB, is over the 200 MiB file limit and refused before decoding). Peak resident memory:
GNU time's maximum RSS for scan, the server's VmHWM (/proc/PID/status) for serve.

Usage: bench/peak_memory.py [--residue build/residue] [--work /tmp/residue-memory] [--sizes 1,12,64,120]
"""
import argparse
import json
import os
import subprocess
import sys
import time
import urllib.request

import numpy as np
from PIL import Image

Image.MAX_IMAGE_PIXELS = None  # our own simulated files
parser = argparse.ArgumentParser()
parser.add_argument("--residue", default="build/residue")
parser.add_argument("--work", default="/tmp/residue-memory")
parser.add_argument("--sizes", default="1,12,64,120")
args = parser.parse_args()
residue = os.path.abspath(args.residue)
work = args.work
here = os.path.dirname(os.path.abspath(__file__))
os.makedirs(work, exist_ok=True)
SHAPES = {1: (1000, 1000), 12: (3000, 4000), 64: (8000, 8000), 120: (10000, 12000)}
FORMATS = {"png": dict(format="PNG", compress_level=1), "jpeg": dict(format="JPEG", quality=90),
           "webp": dict(format="WEBP", quality=80), "tiff": dict(format="TIFF", compression="tiff_adobe_deflate")}


def simulated(h, w):
    rng = np.random.default_rng(h * w)
    out = np.empty((h, w, 3), np.uint8)
    x = np.linspace(0, 255, w, dtype=np.float32)[None, :]
    for y0 in range(0, h, 1000):
        y = np.linspace(0, 255, h, dtype=np.float32)[y0:y0 + 1000, None]
        base = 0.5 * y + 0.5 * x
        block = np.stack([base, 255 - base, (0.7 * base + 0.3 * y) % 255], -1)
        block += rng.normal(0, 2, block.shape[:2] + (1,)).astype(np.float32)
        out[y0:y0 + 1000] = np.clip(block, 0, 255).astype(np.uint8)
    return out


def model():
    path = os.path.join(work, "model.json")
    if not os.path.exists(path):
        subprocess.run(["/usr/bin/python3", os.path.join(here, "..", "tests", "cli", "make_labelled.py"),
                        os.path.join(work, "train"), "1", "jpeg", "png", "20"], check=True)
        subprocess.run([residue, "train", os.path.join(work, "train"), "-o", path, "--no-cache", "--augment", "none"],
                       check=True, capture_output=True)
    return path


def serve_peak(model_path, image):
    proc = subprocess.Popen([residue, "serve", model_path, "--port", "0", "--workers", "1",
                             "--max-body-mb", "300"], stderr=subprocess.PIPE, text=True)
    port = json.loads(proc.stderr.readline())["port"]
    with open(image, "rb") as f:
        body = f.read()
    req = urllib.request.Request(f"http://127.0.0.1:{port}/v1/score", data=body, method="POST",
                                 headers={"Content-Type": "application/octet-stream"})
    try:
        with urllib.request.urlopen(req, timeout=600) as r:
            ok = r.status == 200
    except urllib.error.HTTPError as e:
        ok = json.loads(e.read())["error"]["code"]
    with open(f"/proc/{proc.pid}/status") as f:
        hwm = next(int(line.split()[1]) for line in f if line.startswith("VmHWM"))
    proc.terminate()
    proc.wait()
    return hwm / 1024, ok


model_path = model()
print(f"{'image':<14} {'file MB':>8} {'scan s':>7} {'scan peak MiB':>14} {'serve peak MiB':>15}  record")
for mp in [int(s) for s in args.sizes.split(",")]:
    h, w = SHAPES[mp]
    pixels = None
    for fmt, options in FORMATS.items():
        image = os.path.join(work, f"sim_{mp}mp.{fmt}")
        if not os.path.exists(image):
            if pixels is None:
                pixels = simulated(h, w)
            Image.fromarray(pixels).save(image + ".part", **options)
            os.replace(image + ".part", image)
        t0 = time.time()
        r = subprocess.run(["/usr/bin/time", "-f", "%M", residue, "scan", model_path, image],
                           capture_output=True, text=True)
        seconds = time.time() - t0
        peak = int(r.stderr.strip().splitlines()[-1]) / 1024
        record = json.loads(r.stdout.splitlines()[0])
        outcome = record["error"]["code"] if "error" in record else record["band"]
        served, ok = serve_peak(model_path, image)
        print(f"{mp:>3} MP {fmt:<6} {os.path.getsize(image) / 1e6:8.1f} {seconds:7.2f} {peak:14.0f} {served:15.0f}  "
              f"{outcome}{'' if ok is True else ' / serve: ' + str(ok)}")
        sys.stdout.flush()
