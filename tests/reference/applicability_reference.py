"""Reference values for the applicability check and the processing evidence (Debian python3-scipy,
python3-numpy).

Usage:
  applicability_reference.py cp K N CONFIDENCE
      -> one-sided upper Clopper-Pearson bound twice: scipy.stats.binomtest(K, N,
         alternative="less").proportion_ci(CONFIDENCE, method="exact").high, and
         scipy.stats.beta.ppf(CONFIDENCE, K + 1, N - K)
  applicability_reference.py ppca TRAIN.csv TEST.csv EXPLAINED
      -> the probabilistic-PCA distance (Tipping & Bishop 1999) of each TEST row, per dimension:
         eigh of the sample covariance (ddof 1), the fewest leading components explaining
         EXPLAINED of the variance (at most min(D - 1, n - 2)), sigma^2 the mean discarded variance
  applicability_reference.py dct BLOCK.csv -> scipy.fft.dctn(block, norm="ortho"), row-major
"""
import sys

import numpy as np
from scipy import fft, stats

mode = sys.argv[1]
if mode == "cp":
    k, n, conf = int(sys.argv[2]), int(sys.argv[3]), float(sys.argv[4])
    ci = stats.binomtest(k, n, alternative="less").proportion_ci(confidence_level=conf, method="exact")
    print(repr(ci.high), repr(stats.beta.ppf(conf, k + 1, n - k)))
elif mode == "ppca":
    x = np.loadtxt(sys.argv[2], delimiter=",", ndmin=2)
    t = np.loadtxt(sys.argv[3], delimiter=",", ndmin=2)
    explained = float(sys.argv[4])
    n, d = x.shape
    mu = x.mean(axis=0)
    values, vectors = np.linalg.eigh(np.cov(x, rowvar=False, ddof=1))
    order = np.argsort(values)[::-1]
    values, vectors = np.clip(values[order], 0, None), vectors[:, order]
    k_max = max(1, min(d - 1, n - 2))
    k = 0
    while k < k_max and values[:k].sum() < explained * values.sum():
        k += 1
    k = max(k, 1)
    sigma2 = values[k:].mean()
    c = t - mu
    p = c @ vectors[:, :k]
    q = (c * c).sum(axis=1) - (p * p).sum(axis=1)
    print(" ".join(repr(v) for v in np.sqrt(((p * p / values[:k]).sum(axis=1) + q / sigma2) / d)))
elif mode == "dct":
    b = np.loadtxt(sys.argv[2], delimiter=",").reshape(8, 8)
    print(" ".join(repr(v) for v in fft.dctn(b, norm="ortho").ravel()))
else:
    sys.exit("unknown mode " + mode)
