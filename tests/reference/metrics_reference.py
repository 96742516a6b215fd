"""Reference metrics from sklearn.metrics (Debian python3-sklearn).

Usage: metrics_reference.py SCORES.csv (label,score per line) -> "auc ap brier"
"""
import sys

import numpy as np
from sklearn.metrics import average_precision_score, brier_score_loss, roc_auc_score

d = np.loadtxt(sys.argv[1], delimiter=",")
y, s = d[:, 0].astype(int), d[:, 1]
print(repr(roc_auc_score(y, s)), repr(average_precision_score(y, s)), repr(brier_score_loss(y, s)))
