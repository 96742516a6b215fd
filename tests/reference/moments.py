"""Variance and excess kurtosis with numpy and scipy.stats (Debian), population estimators.

Usage: moments.py IN.f32 -> "variance kurtosis"
"""
import sys

import numpy as np
from scipy.stats import kurtosis

x = np.fromfile(sys.argv[1], dtype="<f4").astype(np.float64)
print(np.var(x), kurtosis(x, fisher=True, bias=True))
