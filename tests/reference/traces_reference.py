"""References for the camera-side trace families (numpy, scipy, Pillow from Debian).

Usage:
  traces_reference.py tuples Q.f32 W H ORDER [columns]
                                                   folded co-occurrence counts of a quantised plane
                                                   (values -2..2) along rows (or columns), order
                                                   2, 3 or 4, with the sign and direction
                                                   symmetry, classes numbered
                                                   in lexicographic order of their smallest member
                                                   (Fridrich & Kodovsky 2012), by brute force
  traces_reference.py cross R.f32 G.f32 B.f32      sign-folded (R, G, B) triple counts (Goljan,
                                                   Fridrich & Cogranne 2014), by brute force
  traces_reference.py texture LUMA.f32 N           poor / rich thirds of 32 px patches by Zhong et
                                                   al.'s (2023) diversity; log10 variance and
                                                   log10 kurtosis (scipy.stats.kurtosis,
                                                   fisher=False) of the [1,-2,1] residuals of each
  traces_reference.py chroma RGB.png               Cb and Cr of the top-left 4 x 4 pixels by Pillow's
                                                   JFIF (full-range BT.601) conversion
"""
import itertools
import sys

import numpy as np


def classes(order, reverse):
    canon = {}
    for t in itertools.product(range(-2, 3), repeat=order):
        neg = tuple(-v for v in t)
        variants = [t, neg] + ([t[::-1], neg[::-1]] if reverse else [])
        canon[t] = min(variants)
    numbers = {c: i for i, c in enumerate(sorted(set(canon.values())))}
    return {t: numbers[c] for t, c in canon.items()}, len(numbers)


mode = sys.argv[1]
if mode == "tuples":
    w, h, order = int(sys.argv[3]), int(sys.argv[4]), int(sys.argv[5])
    q = np.fromfile(sys.argv[2], dtype=np.float32).reshape(h, w).astype(int)
    if sys.argv[6:] == ["columns"]:
        q, w, h = q.T, h, w
    index, n = classes(order, True)
    counts = np.zeros(n)
    for y in range(h):
        for x in range(w - order + 1):
            counts[index[tuple(q[y, x:x + order])]] += 1
    print(" ".join(str(int(c)) for c in counts))
elif mode == "cross":
    r, g, b = (np.fromfile(p, dtype=np.float32).astype(int) for p in sys.argv[2:5])
    index, n = classes(3, False)
    counts = np.zeros(n)
    for t in zip(r, g, b):
        counts[index[tuple(int(v) for v in t)]] += 1
    print(" ".join(str(int(c)) for c in counts))
elif mode == "texture":
    from scipy.stats import kurtosis

    n = int(sys.argv[3])
    luma = np.fromfile(sys.argv[2], dtype=np.float32).astype(np.float64).reshape(n, n)
    p = 32
    patches = [luma[y:y + p, x:x + p] for y in range(0, n, p) for x in range(0, n, p)]

    def diversity(a):
        return (np.abs(np.diff(a, axis=1)).sum() + np.abs(np.diff(a, axis=0)).sum()
                + np.abs(a[:-1, :-1] - a[1:, 1:]).sum() + np.abs(a[1:, :-1] - a[:-1, 1:]).sum())

    order = np.argsort([diversity(a) for a in patches], kind="stable")
    third = len(patches) // 3
    out = []
    for group in (order[:third], order[-third:]):
        res = []
        for i in group:
            a = patches[i]
            res.append((a[:, :-2] - 2 * a[:, 1:-1] + a[:, 2:]).ravel())
            res.append((a[:-2, :] - 2 * a[1:-1, :] + a[2:, :]).ravel())
        r = np.concatenate(res)
        out += [np.log10(r.var() + 1e-6), np.log10(kurtosis(r, fisher=False))]
    print(" ".join(repr(float(v)) for v in out))
elif mode == "chroma":
    from PIL import Image

    ycc = np.asarray(Image.open(sys.argv[2]).convert("RGB").convert("YCbCr"), dtype=float)
    print(" ".join(repr(float(v)) for v in ycc[:4, :4, 1].ravel()),
          " ".join(repr(float(v)) for v in ycc[:4, :4, 2].ravel()))
