"""Reference linear SVM and Platt calibration from scikit-learn (Debian python3-sklearn).

Usage:
  svm_reference.py data OUT.csv            standardised breast-cancer data: label,x1..x30
  svm_reference.py svm DATA.csv C          decision values of SVC(kernel="linear", C,
                                           class_weight="balanced", tol=1e-3), one per line
  svm_reference.py linear DATA.csv C      decision values of LinearSVC(loss="hinge", C,
                                           class_weight="balanced", intercept_scaling=1,
                                           tol=1e-7, max_iter=10**7): liblinear's dual solver
  svm_reference.py platt MARGINS.csv       "A B" of sklearn.calibration._sigmoid_calibration
                                           (Platt's method with Lin, Lin & Weng's targets)
"""
import sys

import numpy as np

mode = sys.argv[1]
if mode == "data":
    from sklearn.datasets import load_breast_cancer
    from sklearn.preprocessing import StandardScaler

    data = load_breast_cancer()
    x = StandardScaler().fit_transform(data.data)
    y = data.target  # 1 = benign; any binary labelling will do
    np.savetxt(sys.argv[2], np.column_stack([y, x]), delimiter=",", fmt="%.17g")
elif mode == "svm":
    from sklearn.svm import SVC

    d = np.loadtxt(sys.argv[2], delimiter=",")
    clf = SVC(kernel="linear", C=float(sys.argv[3]), class_weight="balanced", tol=1e-3)
    clf.fit(d[:, 1:], d[:, 0].astype(int))
    for v in clf.decision_function(d[:, 1:]):
        print(repr(float(v)))
elif mode == "linear":
    from sklearn.svm import LinearSVC

    d = np.loadtxt(sys.argv[2], delimiter=",")
    clf = LinearSVC(loss="hinge", C=float(sys.argv[3]), class_weight="balanced", intercept_scaling=1,
                    tol=1e-7, max_iter=10**7)
    clf.fit(d[:, 1:], d[:, 0].astype(int))
    for v in clf.decision_function(d[:, 1:]):
        print(repr(float(v)))
elif mode == "platt":
    from sklearn.calibration import _sigmoid_calibration

    d = np.loadtxt(sys.argv[2], delimiter=",")
    a, b = _sigmoid_calibration(d[:, 1], d[:, 0].astype(int))
    print(repr(float(a)), repr(float(b)))
