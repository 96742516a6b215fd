"""Reference power spectrum and azimuthal average with numpy.fft and scipy.signal (Debian).

Usage: spectrum.py IN.f32 N BINS -> JSON {"power": [N*N, numpy.fft order], "rings": [BINS]}
Definitions as in features/include/residue/features/spectrum.hpp: periodic Hann window
(scipy.signal.get_window("hann", N)), power |FFT2(w f)|^2 / sum(w2d^2), rings over r in [0, 0.5).
"""
import json
import sys

import numpy as np
from scipy.signal import get_window

path, n, bins = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
f = np.fromfile(path, dtype="<f4").astype(np.float64).reshape(n, n)
w = get_window("hann", n)
w2 = np.outer(w, w)
power = np.abs(np.fft.fft2(w2 * f)) ** 2 / np.sum(w2**2)
fy, fx = np.meshgrid(np.fft.fftfreq(n), np.fft.fftfreq(n), indexing="ij")
r = np.hypot(fx, fy)
inside = r < 0.5
ring = np.floor(r[inside] / 0.5 * bins).astype(int)
sums = np.bincount(ring, weights=power[inside], minlength=bins)
counts = np.bincount(ring, minlength=bins)
rings = np.where(counts > 0, sums / np.maximum(counts, 1), 0.0)
print(json.dumps({"power": power.ravel().tolist(), "rings": rings.tolist()}))
