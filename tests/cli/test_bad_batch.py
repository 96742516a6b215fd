"""A batch of 1,000 bad files of every kind, scanned as an archivist would: one record each, exit 3,
no crash, bounded memory, and the time it takes.

Kinds (files made here from scikit-image's sample photographs and bytes this script invents):
truncated at random offsets, random bit flips, the wrong extension, a header declaring too many
pixels, decompression bombs (a small PNG inflating to 64 MP of zeros), zero bytes, random bytes
and text named like images, names that are not UTF-8, FIFOs, broken symbolic links and unreadable
permissions; plus folders named like images (descended into, no record). A FIFO must never be
opened (that would block the scan for ever).

Usage: test_bad_batch.py PATH/TO/residue [sanitized]
"""
import io
import json
import os
import random
import struct
import subprocess
import sys
import tempfile
import time
import urllib.parse
import zlib

import numpy as np
import skimage.data as data
from PIL import Image

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import check, finish, runner  # noqa: E402

residue = sys.argv[1]
sanitized = len(sys.argv) > 2 and sys.argv[2] == "sanitized"
run = runner(residue)
here = os.path.dirname(os.path.abspath(__file__))
rng = random.Random(13)


def encoded(array, fmt, **options):
    out = io.BytesIO()
    Image.fromarray(array).save(out, fmt, **options)
    return out.getvalue()


def chunk(kind, body):
    return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))


def png_declaring(w, h, idat):
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 0, 0, 0, 0))
            + chunk(b"IDAT", idat) + chunk(b"IEND", b""))


photo = data.astronaut()[:256, :256]
bases = {"png": encoded(photo, "PNG"), "jpg": encoded(photo, "JPEG", quality=90),
         "webp": encoded(photo, "WEBP", quality=85), "tif": encoded(photo, "TIFF")}
# 8000 x 8000 grey zeros: 64 MB of pixels in a file of about 64 KB (under the 120 MP limit, so it
# is really decoded, row by row).
bomb = png_declaring(8000, 8000, zlib.compress(b"\0" * (8001 * 8000), 9))

with tempfile.TemporaryDirectory() as tmp:
    train = os.path.join(tmp, "train")
    subprocess.run(["/usr/bin/python3", os.path.join(here, "make_labelled.py"), train, "2", "jpeg", "png", "12"],
                   check=True)
    model = os.path.join(tmp, "model.json")
    check(run(["train", train, "-o", model, "--no-cache", "--augment", "none", "--folds", "3"]).returncode == 0,
          "train a model for the batch")
    batch = os.path.join(tmp, "batch").encode()
    os.makedirs(batch)
    expected = {}  # exact path bytes -> set of acceptable outcomes (error codes, or "scored")
    for i in range(1000):
        kind = i % 10
        ext, base = rng.choice(sorted(bases.items()))
        name = os.path.join(batch, f"{i:04d}".encode())
        if kind == 0:
            path, content = name + b"-truncated." + ext.encode(), base[: rng.randrange(1, len(base) - 1)]
            ok = {"truncated", "corrupt", "not-an-image", "unsupported", "scored"}
        elif kind == 1:
            flipped = bytearray(base)
            for _ in range(rng.randint(1, 8)):
                k = rng.randrange(len(base) // 2, len(base))
                flipped[k] ^= 1 << rng.randrange(8)
            path, content = name + b"-flipped." + ext.encode(), bytes(flipped)
            ok = {"truncated", "corrupt", "unsupported", "scored"}
        elif kind == 2:
            wrong = {"png": b"jpg", "jpg": b"webp", "webp": b"tif", "tif": b"png"}[ext]
            path, content, ok = name + b"-renamed." + wrong, base, {"scored"}
        elif kind == 3:
            w, h = rng.randint(11000, 100000), rng.randint(11000, 100000)
            path, content, ok = name + b"-huge.png", png_declaring(w, h, zlib.compress(b"\0" * 100)), {"too-large"}
        elif kind == 4 and i % 100 == 4:
            path, content, ok = name + b"-bomb.png", bomb, {"scored"}
        elif kind == 4:
            path, content, ok = name + b"-zero-idat.png", png_declaring(600, 600, zlib.compress(b"")), {"truncated", "corrupt"}
        elif kind == 5:
            path, content, ok = name + b"-empty." + ext.encode(), b"", {"empty"}
        elif kind == 6:
            path, content = name + b"-random." + ext.encode(), rng.randbytes(rng.randint(1, 5000))
            ok = {"not-an-image", "truncated", "corrupt", "unsupported", "too-large", "too-small"}
        elif kind == 7:
            path, content, ok = name + b"-text.jpg", b"not an image\n" * 50, {"not-an-image"}
        elif kind == 8:
            path, content, ok = name + b"-\xff\xfe-caf\xe9." + ext.encode(), base, {"scored"}
        else:
            path, content, ok = name + b"-special.png", None, {"unreadable"}
        if content is not None:
            with open(path, "wb") as f:
                f.write(content)
        elif i % 30 == 9:
            os.mkfifo(path)
        elif i % 30 == 19:
            os.symlink(b"/nonexistent/target.png", path)
        else:
            with open(path, "wb") as f:
                f.write(bases["png"])
            os.chmod(path, 0)
            ok = {"scored"} if os.geteuid() == 0 else {"unreadable"}  # root reads anything
        expected[path] = ok
    for k in range(5):
        os.makedirs(os.path.join(batch, f"folder-{k}.png".encode()))

    out = os.path.join(tmp, "batch.jsonl")
    t0 = time.time()
    scan = subprocess.run(["/usr/bin/time", "-f", "%M", residue, "scan", model, batch, "-o", out, "--jobs", "2"],
                          capture_output=True, timeout=1800)
    seconds = time.time() - t0
    peak_mib = int(scan.stderr.decode(errors="replace").strip().splitlines()[-1]) / 1024
    check(scan.returncode == 3, f"exit 3 when some inputs fail, no crash (got {scan.returncode})")
    with open(out, "rb") as f:
        records = [json.loads(line) for line in f.read().decode("utf-8", "strict").splitlines()]
    check(len(records) == 1000, f"one record per file: {len(records)} of 1000 (folders named like images give none)")
    seen = {}
    for r in records:
        exact = urllib.parse.unquote_to_bytes(r["path_bytes"]) if "path_bytes" in r else r["path"].encode()
        seen[exact] = r["error"]["code"] if "error" in r else "scored"
    check(set(seen) == set(expected), "every file has its record, by its exact name")
    wrong = [(p, seen.get(p), sorted(ok)) for p, ok in expected.items() if seen.get(p) not in ok]
    check(not wrong, f"every outcome is one expected for its kind: {wrong[:5]}")
    check(all("advisory" in r for r in records), "every record carries the advisory")
    print(f"1,000 bad files: {seconds:.1f} s on 2 jobs, peak memory {peak_mib:.0f} MiB"
          + (" (sanitizers)" if sanitized else ""))
    if not sanitized:
        check(peak_mib < 300, f"peak memory under 300 MiB ({peak_mib:.0f})")

finish()
