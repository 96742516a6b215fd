"""Writes the test images with Pillow and numpy (Debian python3-pil, python3-numpy).

Usage: make_files.py OUTDIR. Every file is made here from scikit-image's sample photographs
(public domain / CC0) or from bytes this script invents; the damaged ones are labelled by name.
"""
import os
import struct
import sys
import zlib

import numpy as np
import skimage.data as data
from PIL import Image

out = sys.argv[1]
os.makedirs(out, exist_ok=True)
coffee = data.coffee()        # 400 x 600 RGB
camera = data.camera()        # 512 x 512 grey
astronaut = data.astronaut()  # 512 x 512 RGB


def path(name):
    return os.path.join(out, name)


for q in (50, 75, 90, 95):
    Image.fromarray(coffee).save(path(f"coffee_q{q}.jpg"), quality=q)
Image.fromarray(coffee).save(path("coffee.png"))
Image.fromarray(coffee).save(path("coffee.webp"), lossless=True)
Image.fromarray(coffee).save(path("coffee.tif"))
Image.fromarray(coffee).save(path("coffee.bmp"))
Image.fromarray(camera).save(path("camera_grey.png"))
Image.fromarray(camera.astype(np.uint16) * 257).save(path("camera_16bit.png"))
rgba = np.dstack([astronaut, np.full(astronaut.shape[:2], 200, np.uint8)])
Image.fromarray(rgba, "RGBA").save(path("astronaut_rgba.png"))
Image.fromarray(astronaut).save(path("astronaut.png"))
Image.fromarray(astronaut[:10, :10]).save(path("tiny_10x10.png"))
Image.fromarray(astronaut[:100, :150]).save(path("thumb_150x100.png"))
Image.fromarray(data.hubble_deep_field()).save(path("hubble_q90.jpg"), quality=90)

# Damaged and hostile files.
with open(path("coffee_q90.jpg"), "rb") as f:
    jpeg = f.read()
with open(path("coffee.png"), "rb") as f:
    png = f.read()
open(path("empty.jpg"), "wb").close()
with open(path("truncated_half.jpg"), "wb") as f:
    f.write(jpeg[: len(jpeg) // 2])
with open(path("truncated_tail.jpg"), "wb") as f:
    f.write(jpeg[:-300])
with open(path("truncated_header.jpg"), "wb") as f:
    f.write(jpeg[:100])
with open(path("truncated_half.png"), "wb") as f:
    f.write(png[: len(png) // 2])
with open(path("random.png"), "wb") as f:
    f.write(np.random.RandomState(7).bytes(5000))
with open(path("text.jpg"), "wb") as f:
    f.write(b"This is a text file that pretends to be a JPEG by its name.\n" * 20)


def chunk(kind, body):
    return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))


ihdr = struct.pack(">IIBBBBB", 100000, 100000, 8, 2, 0, 0, 0)  # 10^10 pixels, RGB 8-bit
with open(path("bomb_100000x100000.png"), "wb") as f:
    f.write(b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(b"\0" * 1000)) + chunk(b"IEND", b""))
print("ok")
