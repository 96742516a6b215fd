"""Builds a small labelled set for the end-to-end tests, clearly simulated.

Usage: make_labelled.py ROOT SEED CAMERA_FORMAT GENERATED_FORMAT [COUNT]
camera/: 256 px crops of scikit-image's sample photographs (public domain / CC0).
generated/<name>/: SIMULATED generator output, made here: a 128 px crop upsampled 2x by a
  stride-2 transposed convolution ("sim-tconv") or bilinear interpolation ("sim-bilinear"), the
  upsampling step of image decoders; not the output of any real generator.
Formats: png or jpeg (quality 90).
"""
import os
import sys

import numpy as np
import skimage.data as data
from PIL import Image

root, seed, camera_format, generated_format = sys.argv[1], int(sys.argv[2]), sys.argv[3], sys.argv[4]
count = int(sys.argv[5]) if len(sys.argv) > 5 else 30
rng = np.random.RandomState(seed)
photos = [data.astronaut(), data.coffee(), data.chelsea(), data.rocket(), data.hubble_deep_field(),
          data.immunohistochemistry(), data.coins()[..., None].repeat(3, axis=2)]
KERNEL = np.array([[0.3, 0.7, 0.2], [0.6, 1.0, 0.5], [0.2, 0.6, 0.3]])


def crop(size):
    p = photos[rng.randint(len(photos))]
    y = rng.randint(0, p.shape[0] - size + 1)
    x = rng.randint(0, p.shape[1] - size + 1)
    return p[y:y + size, x:x + size].astype(np.float64)


def tconv(a):
    h, w = a.shape[:2]
    out = np.zeros((2 * h + 2, 2 * w + 2, 3))
    for i in range(3):
        for j in range(3):
            out[i:i + 2 * h:2, j:j + 2 * w:2] += KERNEL[i, j] * a
    return out[1:-1, 1:-1] / 1.5


def bilinear(a):
    img = Image.fromarray(np.clip(a, 0, 255).astype(np.uint8))
    return np.asarray(img.resize((a.shape[1] * 2, a.shape[0] * 2), Image.BILINEAR)).astype(np.float64)


def save(a, path, fmt):
    os.makedirs(os.path.dirname(path), exist_ok=True)
    img = Image.fromarray(np.clip(np.round(a), 0, 255).astype(np.uint8))
    if fmt == "jpeg":
        img.save(path + ".jpg", quality=90)
    else:
        img.save(path + ".png")


for i in range(count):
    save(crop(256), os.path.join(root, "camera", f"photo_{seed}_{i:03d}"), camera_format)
for i in range(count // 2):
    save(tconv(crop(128)), os.path.join(root, "generated", "sim-tconv", f"sim_{seed}_{i:03d}"), generated_format)
    save(bilinear(crop(128)), os.path.join(root, "generated", "sim-bilinear", f"sim_{seed}_{i:03d}"), generated_format)
