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


# PNG variants for the row-by-row decoder, written here byte by byte from the PNG specification
# (W3C PNG, 2nd edition: IHDR colour types and depths, filter type 0, Adam7 passes in section 8.2),
# because Pillow writes neither 16-bit colour nor interlaced files.
ADAM7 = [(0, 0, 8, 8), (4, 0, 8, 8), (0, 4, 4, 8), (2, 0, 4, 4), (0, 2, 2, 4), (1, 0, 2, 2), (0, 1, 1, 2)]


def raw_png(name, pixels, depth, colour, interlace=False, extra=b""):
    """pixels: H x W x C array of samples (uint8 or uint16)."""
    h, w = pixels.shape[:2]
    big = pixels.astype(">u2") if depth == 16 else pixels.astype(np.uint8)

    def rows(sub):
        return b"".join(b"\0" + sub[y].tobytes() for y in range(sub.shape[0]))
    if interlace:
        body = b"".join(rows(big[y0::dy, x0::dx]) for x0, y0, dx, dy in ADAM7
                        if big[y0::dy, x0::dx].size)
    else:
        body = rows(big)
    ihdr = struct.pack(">IIBBBBB", w, h, depth, colour, 0, 0, 1 if interlace else 0)
    with open(path(name), "wb") as f:
        f.write(b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + extra + chunk(b"IDAT", zlib.compress(body))
                + chunk(b"IEND", b""))


part = astronaut[:300, :280]
raw_png("png_rgb8_adam7.png", part, 8, 2, interlace=True)
deep = (part.astype(np.uint32) * 200 + np.arange(part.shape[1], dtype=np.uint32)[None, :, None] * 41).astype(np.uint16)
raw_png("png_rgb16.png", deep, 16, 2)
raw_png("png_rgb16_adam7.png", deep, 16, 2, interlace=True)
grey_alpha = np.dstack([camera[:300, :300].astype(np.uint16) * 257, np.full((300, 300), 40000, np.uint16)])
raw_png("png_grey_alpha16.png", grey_alpha, 16, 4)
raw_png("png_grey_trns.png", camera[:300, :300, None], 8, 0, extra=chunk(b"tRNS", struct.pack(">H", 0)))
Image.fromarray(part).quantize(200).save(path("png_palette.png"))
Image.fromarray(part).quantize(200).save(path("png_palette_trns.png"), transparency=3)
Image.fromarray(camera[:300, :300] > 128).save(path("png_grey1.png"))
Image.fromarray(astronaut[:301, :257]).save(path("png_rgb8_257x301.png"))
# WebP variants for the banded decoder: lossy with nine windows in three bands, lossy with alpha.
hubble = data.hubble_deep_field()  # 872 x 1000 RGB
Image.fromarray(hubble).save(path("hubble_q80.webp"), quality=80)
hubble_alpha = np.dstack([hubble, np.full(hubble.shape[:2], 180, np.uint8)])
Image.fromarray(hubble_alpha, "RGBA").save(path("hubble_alpha_q80.webp"), quality=80)
Image.fromarray(astronaut[:301, :257]).save(path("webp_257x301_q90.webp"), quality=90)
# TIFF variants: read scanline by scanline (grey 8/16-bit, RGB, RGBA, LZW, nine windows) or, for the
# rarer layouts (grey + alpha, 1-bit, palette, JPEG-compressed YCbCr), decoded whole.
Image.fromarray(hubble).save(path("hubble.tif"))
Image.fromarray(camera.astype(np.uint16) * 257 + 3).save(path("tif_grey16.tif"))
Image.fromarray(np.dstack([part, np.full(part.shape[:2], 9, np.uint8)]), "RGBA").save(path("tif_rgba.tif"))
Image.fromarray(part).save(path("tif_lzw.tif"), compression="tiff_lzw")
Image.fromarray(part).save(path("tif_jpeg.tif"), compression="jpeg")
Image.fromarray(np.dstack([camera, np.full_like(camera, 9)]), "LA").save(path("tif_grey_alpha.tif"))
Image.fromarray(camera > 100).save(path("tif_1bit.tif"))
Image.fromarray(part).quantize(100).save(path("tif_palette.tif"))
print("ok")
