"""Reference values for the coding-surprise family (Debian python3-numpy, python3-scipy).

Usage:
  surprise_reference.py entropy THETA
      -> scipy.stats.entropy (base 2) of the two-sided geometric distribution
         P(r) = (1 - t) / (1 + t) t^|r| over r = -4000..4000, its mean |r| and its mean r^2 by
         direct sums
  surprise_reference.py quantiles VALUES...
      -> numpy.quantile (linear interpolation) at 0.25, 0.5 and 0.75
  surprise_reference.py classes IMAGE.csv
      -> per activity class 0..8: pixels and sum of |r|, written independently with numpy: the
         JPEG-LS MED prediction (ISO/IEC 14495-1, A.3-A.4) on an n x n integer image, the residual
         reduced modulo 256 to [-128, 127], the class min(|Q1| + |Q2| + |Q3|, 8) of the gradient
         regions with T1 = 3, T2 = 7, T3 = 21; pixels with all four causal neighbours
"""
import sys

import numpy as np
from scipy import stats

mode = sys.argv[1]
if mode == "entropy":
    t = float(sys.argv[2])
    r = np.arange(-4000, 4001)
    p = (1 - t) / (1 + t) * t ** np.abs(r)
    print(repr(stats.entropy(p, base=2)), repr(float(np.sum(np.abs(r) * p))), repr(float(np.sum(r * r * p))))
elif mode == "quantiles":
    v = np.array([float(x) for x in sys.argv[2:]])
    print(" ".join(repr(float(q)) for q in np.quantile(v, [0.25, 0.5, 0.75])))
elif mode == "classes":
    x = np.loadtxt(sys.argv[2], delimiter=",", dtype=np.int64, ndmin=2)
    n = x.shape[0]
    a = x[1:, 0:n - 2]   # west of (y, x) for y >= 1, 1 <= x <= n - 2
    b = x[0:n - 1, 1:n - 1]
    c = x[0:n - 1, 0:n - 2]
    d = x[0:n - 1, 2:n]
    cur = x[1:, 1:n - 1]
    pred = np.where(c >= np.maximum(a, b), np.minimum(a, b), np.where(c <= np.minimum(a, b), np.maximum(a, b), a + b - c))
    res = np.mod(cur - pred + 128, 256) - 128

    def region(g):
        out = np.zeros_like(g)
        out[g <= -21] = -4
        out[(g > -21) & (g <= -7)] = -3
        out[(g > -7) & (g <= -3)] = -2
        out[(g > -3) & (g < 0)] = -1
        out[(g > 0) & (g < 3)] = 1
        out[(g >= 3) & (g < 7)] = 2
        out[(g >= 7) & (g < 21)] = 3
        out[g >= 21] = 4
        return out

    cls = np.minimum(np.abs(region(d - b)) + np.abs(region(b - c)) + np.abs(region(c - a)), 8)
    values = []
    for k in range(9):
        sel = cls == k
        values += [int(sel.sum()), int(np.abs(res[sel]).sum())]
    print(" ".join(str(v) for v in values))
