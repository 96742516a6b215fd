"""Reference values for drift and model comparison from numpy and scipy (Debian python3-numpy,
python3-scipy).

Usage:
  monitoring_reference.py psi E1,E2,... A1,A2,...  -> PSI as scipy.stats.entropy(a, e) + entropy(e, a)
                                                      (symmetrised Kullback-Leibler divergence), floors 1e-4
  monitoring_reference.py deciles VALUES.txt       -> numpy.quantile(values, [0.1 .. 0.9]) (linear)
  monitoring_reference.py percentile Q VALUES.txt  -> numpy.percentile(values, Q) (linear)
  monitoring_reference.py chi2_99                  -> scipy.stats.chi2.ppf(0.99, df) for df = 1 .. 20
"""
import sys

import numpy as np
from scipy import stats

mode = sys.argv[1]
if mode == "psi":
    e = np.maximum(np.array([float(v) for v in sys.argv[2].split(",")]), 1e-4)
    a = np.maximum(np.array([float(v) for v in sys.argv[3].split(",")]), 1e-4)
    # entropy() normalises its inputs; the floors keep sums at 1 within 1e-3, so compare the
    # un-normalised sum as well: sum (a - e) ln(a / e) == KL(a||e) + KL(e||a) for normalised a, e.
    print(repr(float(np.sum(a * np.log(a / e)) + np.sum(e * np.log(e / a)))),
          repr(float(stats.entropy(a, e) + stats.entropy(e, a))))
elif mode == "deciles":
    v = np.loadtxt(sys.argv[2])
    print(" ".join(repr(float(q)) for q in np.quantile(v, np.arange(1, 10) / 10.0)))
elif mode == "percentile":
    v = np.loadtxt(sys.argv[3])
    print(repr(float(np.percentile(v, float(sys.argv[2])))))
elif mode == "chi2_99":
    print(" ".join(repr(float(stats.chi2.ppf(0.99, df))) for df in range(1, 21)))
else:
    sys.exit("unknown mode " + mode)
