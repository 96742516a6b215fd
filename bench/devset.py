"""The development set as the benchmarks see it (reads ../shared/data/dev in place; copies nothing
into the project): camera photographs, generated singles, and the cells cut from the sample grids
whose layout the manifest gives (written losslessly as PNG under a scratch folder).

items(dev, work) -> [(path, label, generator, group_in_distribution, group_unseen)]
processed(path, name, work) -> the image after one of TRANSFORMS (everyday processing, Pillow)
recompressed(path, work) -> the image as JPEG quality 85 (Pillow), cached under work/q85
manifest(items, work, name, variant, grouping) -> CSV manifest for `residue train --group-by manifest`
  group_in_distribution: one source picture (a grid's cells together; camera sets that share
  scenes, LIVE1 + Kodak24 and Set5/Set14 + OpenCV's samples, one group each; DreamBooth objects one
  group per object); group_unseen: for generated images their generator family.
"""
import csv
import hashlib
import io
import os
import re

import numpy as np
from PIL import Image, ImageFilter


def family_of(path):
    parts = path.split("/")
    return parts[2] if parts[0] == "grids" else (parts[1] if parts[0] == "generated" else "camera")


def camera_group(row):
    src = row["path_in_source"]
    if "LIVE1" in src or "Kodak24" in src:
        return "scenes:live1-kodak"
    if "Set5" in src or "Set14" in src or row["source"] == "debian:opencv-doc":
        return "scenes:classic-test-images"
    if row["source"] == "google/dreambooth":
        return "object:" + src.split("/")[-2]
    return "file:" + row["path"]


def cells(row):
    """Yields (x, y, w, h) cells of a grid whose layout the note gives; nothing otherwise."""
    w, h, note = int(row["width"]), int(row["height"]), row["note"]
    m = re.search(r"(\d+)x(\d+) grid of (\d+)px tiles", note) or re.search(r"(\d+) tiles of (\d+)", note) \
        or re.search(r"(\d+)px tiles", note) or re.search(r"(\d+)x(\d+) tile grid", note) \
        or re.search(r"strip, (\d+) tiles$", note) or re.search(r"strip of (\d+) ", note)
    if "padding" in note or "collage" in note or "SeFa" in note or m is None:
        return
    if "tile grid" in note:
        nx, ny = int(m.group(1)), int(m.group(2))
        tw, th = w // nx, h // ny
    elif "grid of" in note:
        tw = th = int(m.group(3))
    elif "tiles of" in note:
        tw = th = int(m.group(2))
    elif "px tiles" in note:
        tw = th = int(m.group(1))
    else:  # a strip of n tiles separated by thin gaps
        n = int(m.group(1))
        tw, th = w // n, h
    for y in range(0, h - th + 1, th):
        for x in range(0, w - tw + 1, tw):
            yield x, y, tw, th


def items(dev, work):
    with open(os.path.join(dev, "manifest.tsv")) as f:
        rows = list(csv.DictReader(f, delimiter="\t"))
    items = []  # (path, label, generator, group_in_distribution, group_unseen)
    cut_dir = os.path.join(work, "cells")
    for row in rows:
        fam = family_of(row["path"])
        src = os.path.join(dev, row["path"])
        if row["grid"] == "1":
            image = None
            for k, (x, y, tw, th) in enumerate(cells(row)):
                out = os.path.join(cut_dir, fam, os.path.basename(row["path"]).rsplit(".", 1)[0] + f"__cell{k:02d}.png")
                if not os.path.exists(out):
                    image = image or Image.open(src).convert("RGB")
                    os.makedirs(os.path.dirname(out), exist_ok=True)
                    image.crop((x, y, x + tw, y + th)).save(out)
                items.append((out, "generated", fam, "grid:" + row["path"], "family:" + fam))
        elif row["class"] == "camera":
            items.append((src, "camera", "camera", camera_group(row), camera_group(row)))
        else:
            items.append((src, "generated", fam, "file:" + row["path"], "family:" + fam))
    return items


def recompressed(path, work):
    out = os.path.join(work, "q85", os.path.relpath(path, "/").rsplit(".", 1)[0] + ".jpg")
    if not os.path.exists(out):
        os.makedirs(os.path.dirname(out), exist_ok=True)
        Image.open(path).convert("RGB").save(out, quality=85)
    return out


def manifest(all_items, work, name, variant, grouping):
    """variant "as-is" or "q85"; grouping "in" (source picture) or "unseen" (generator family)."""
    path = os.path.join(work, f"{name}.csv")
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["path", "label", "generator", "group"])
        for p, label, gen, g_in, g_un in all_items:
            w.writerow([recompressed(p, work) if variant == "q85" else p, label, gen,
                        g_in if grouping == "in" else g_un])
    return path


def rgb(path):
    return Image.open(path).convert("RGB")


def scaled(im, f, resample):
    return im.resize((max(1, round(im.width * f)), max(1, round(im.height * f))), resample)


def noisy(im, sigma, path):
    """Additive Gaussian noise (numpy, seeded from the path), clipped and rounded to 8 bits."""
    rng = np.random.default_rng(int(hashlib.sha256(path.encode()).hexdigest()[:8], 16))
    a = np.asarray(im, dtype=np.float64) + rng.normal(0.0, sigma, (im.height, im.width, 3))
    return Image.fromarray(np.clip(np.rint(a), 0, 255).astype(np.uint8))


def gamma(im, g):
    """255 (v / 255) ** (1 / g), rounded."""
    lut = [round(255 * (v / 255) ** (1 / g)) for v in range(256)]
    return im.point(lut * 3)


def jpeg_round_trip(im, quality):
    buf = io.BytesIO()
    im.save(buf, "JPEG", quality=quality)
    buf.seek(0)
    return Image.open(buf).convert("RGB")


def centre_crop(im, f):
    w, h = max(1, int(im.width * f)), max(1, int(im.height * f))
    x, y = (im.width - w) // 2, (im.height - h) // 2
    return im.crop((x, y, x + w, y + h))


TRANSFORMS = {
    "as-published": None,
    "jpeg-q95": lambda p, out: rgb(p).save(out, "JPEG", quality=95),
    "jpeg-q75": lambda p, out: rgb(p).save(out, "JPEG", quality=75),
    "jpeg-q50": lambda p, out: rgb(p).save(out, "JPEG", quality=50),
    "webp-q80": lambda p, out: rgb(p).save(out, "WEBP", quality=80),
    "downscale-0.5": lambda p, out: scaled(rgb(p), 0.5, Image.BOX).save(out, "PNG"),
    "upscale-1.5": lambda p, out: scaled(rgb(p), 1.5, Image.BICUBIC).save(out, "PNG"),
    "palette-256": lambda p, out: rgb(p).quantize(256).save(out, "PNG"),
    "sharpen": lambda p, out: rgb(p).filter(ImageFilter.UnsharpMask(radius=1, percent=80, threshold=0)).save(out, "PNG"),
    "crop-centre-0.6": lambda p, out: centre_crop(rgb(p), 0.6).save(out, "PNG"),
    "screenshot-0.8": lambda p, out: scaled(rgb(p), 0.8, Image.BILINEAR).save(out, "PNG"),
    # Laundering: what someone does to a generated image so that it passes.
    "blur-1.5": lambda p, out: rgb(p).filter(ImageFilter.GaussianBlur(1.5)).save(out, "PNG"),
    "noise-4": lambda p, out: noisy(rgb(p), 4.0, p).save(out, "PNG"),
    "median-3": lambda p, out: rgb(p).filter(ImageFilter.MedianFilter(3)).save(out, "PNG"),
    "resize-chain": lambda p, out: scaled(jpeg_round_trip(scaled(rgb(p), 0.6, Image.BOX), 85), 0.8, Image.BOX)
    .save(out, "JPEG", quality=80),
    "print-scan": lambda p, out: noisy(gamma(rgb(p).filter(ImageFilter.GaussianBlur(1.0)), 1.2), 3.0, p)
    .save(out, "PNG"),
}
EXT = {"jpeg-q95": "jpg", "jpeg-q75": "jpg", "jpeg-q50": "jpg", "webp-q80": "webp", "resize-chain": "jpg"}


def processed(path, name, work):
    """The image after the everyday transform `name` (Pillow), cached under work/processed."""
    if TRANSFORMS[name] is None:
        return path
    key = hashlib.sha256(path.encode()).hexdigest()[:16]
    out = os.path.join(work, "processed", name, key + "." + EXT.get(name, "png"))
    if not os.path.exists(out):
        os.makedirs(os.path.dirname(out), exist_ok=True)
        TRANSFORMS[name](path, out + ".tmp")
        os.replace(out + ".tmp", out)
    return out
