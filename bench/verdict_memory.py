#!/usr/bin/python3
"""Memory the service spends remembering feature vectors for verdicts (serve --verdicts --remember N):
scores 1.25 N (--times) distinct SIMULATED images (made here: 128 px noise and gradients, one per seed, PNG)
through POST /v1/score, one client, and reads, every N/4 images, the service's resident memory (VmRSS from
/proc) and what /metrics says the remembered vectors hold. The same run without --verdicts gives
the baseline.

Usage: bench/verdict_memory.py [--residue build/residue] [--remember 2000]
"""
import argparse
import io
import socket
import os
import subprocess
import tempfile
import time
import urllib.request

import numpy as np
from PIL import Image

parser = argparse.ArgumentParser()
parser.add_argument("--residue", default="build/residue")
parser.add_argument("--remember", type=int, default=2000)
parser.add_argument("--times", type=float, default=1.25, help="images scored, in multiples of --remember")
args = parser.parse_args()
residue = os.path.abspath(args.residue)
n = int(args.remember * args.times)


def image(seed):
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:128, 0:128]
    base = (x * rng.uniform(0.2, 1.5) + y * rng.uniform(0.2, 1.5))[..., None] + rng.normal(0, 12, (128, 128, 3))
    buf = io.BytesIO()
    Image.fromarray(np.clip(base, 0, 255).astype(np.uint8)).save(buf, "PNG")
    return buf.getvalue()


def rss_mb(pid):
    with open(f"/proc/{pid}/status") as f:
        for line in f:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024
    return 0.0


def metric(base, name):
    with urllib.request.urlopen(base + "/metrics", timeout=10) as r:
        for line in r.read().decode().splitlines():
            if line.startswith(name + " "):
                return float(line.split()[1])
    return 0.0


with tempfile.TemporaryDirectory() as tmp:
    subprocess.run(["/usr/bin/python3", os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "cli",
                    "make_labelled.py"), os.path.join(tmp, "set"), "5", "png", "png", "20"], check=True)
    model = os.path.join(tmp, "model.json")
    subprocess.run([residue, "train", os.path.join(tmp, "set"), "-o", model, "--no-cache", "--augment", "none"],
                   check=True, capture_output=True)
    images = [image(seed) for seed in range(n)]
    for label, extra in (("without --verdicts", []),
                         (f"--verdicts --remember {args.remember}",
                          ["--verdicts", os.path.join(tmp, "v.sqlite"), "--remember", str(args.remember)])):
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            port = s.getsockname()[1]
        proc = subprocess.Popen([residue, "serve", model, "--port", str(port), "--workers", "2",
                                 "--access-log", os.devnull, *extra])
        base = f"http://127.0.0.1:{port}"
        for _ in range(100):
            try:
                urllib.request.urlopen(base + "/v1/health", timeout=1).read()
                break
            except OSError:
                time.sleep(0.1)
        try:
            print(f"\n{label}: images scored, service RSS (MB), remembered vectors, their bytes (MB)")
            print(f"  {0:6d} {rss_mb(proc.pid):8.1f}")
            t0 = time.time()
            for k, data in enumerate(images, 1):
                req = urllib.request.Request(base + "/v1/score", data=data, headers={"Content-Type": "image/png"})
                urllib.request.urlopen(req, timeout=60).read()
                if k % (args.remember // 4) == 0 or k == n:
                    print(f"  {k:6d} {rss_mb(proc.pid):8.1f} {metric(base, 'residue_remembered_vectors'):8.0f} "
                          f"{metric(base, 'residue_remembered_bytes') / 1e6:8.2f}")
            print(f"  {1000 * (time.time() - t0) / n:.1f} ms per /v1/score, one client (metrics reads included)")
        finally:
            proc.terminate()
            proc.wait()
