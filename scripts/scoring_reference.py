#!/usr/bin/env python3
"""Writes the outside reference values for the scoring tests (tests/scoring.rs).

Run once after changing the data (needs `pip install scikit-learn numpy`); the CSVs are committed
so tests need no Python.
  tests/reference/logistic_data.csv     a small dataset (x0..x4, y); x3 is constant
  tests/reference/logistic_sklearn.csv  scikit-learn LogisticRegression(C = 1 / l2) coefficients
                                        on the StandardScaler-standardised columns, per l2
  tests/reference/pr_scores.csv         scores (with ties) and 0/1 labels
  tests/reference/pr_curve.csv          sklearn.metrics.precision_recall_curve on them
  tests/reference/pr_metrics.csv        precision_recall_fscore_support (binary), accuracy_score
                                        at several thresholds, and average_precision_score
"""
import csv
import pathlib

import numpy as np
import sklearn
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import (accuracy_score, average_precision_score,
                             precision_recall_curve, precision_recall_fscore_support)
from sklearn.preprocessing import StandardScaler

out = pathlib.Path(__file__).resolve().parent.parent / "tests" / "reference"
out.mkdir(parents=True, exist_ok=True)
rng = np.random.default_rng(20261201)

# Logistic regression: 240 rows, correlated columns, one constant, a minority positive class.
n = 240
x0 = rng.normal(0.0, 1.0, n)
x1 = 0.6 * x0 + rng.normal(0.0, 0.8, n)
x2 = rng.exponential(2.0, n)
x3 = np.full(n, 3.0)
x4 = (rng.random(n) < 0.3).astype(float)
eta = -2.0 + 1.2 * x0 - 0.7 * x1 + 0.4 * x2 + 1.5 * x4
y = (rng.random(n) < 1.0 / (1.0 + np.exp(-eta))).astype(int)
X = np.column_stack([x0, x1, x2, x3, x4])
with open(out / "logistic_data.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["x0", "x1", "x2", "x3", "x4", "y"])
    for row, label in zip(X, y):
        w.writerow([repr(float(v)) for v in row] + [int(label)])

Z = StandardScaler().fit_transform(X)
with open(out / "logistic_sklearn.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["l2", "intercept", "w0", "w1", "w2", "w3", "w4", "sklearn"])
    for l2 in [0.01, 1.0, 25.0]:
        m = LogisticRegression(C=1.0 / l2, tol=1e-12, max_iter=100000, solver="lbfgs")
        m.fit(Z, y)
        w.writerow([l2, repr(float(m.intercept_[0]))]
                   + [repr(float(c)) for c in m.coef_[0]] + [sklearn.__version__])

# Metrics: 80 scores on a coarse grid (so there are ties), labels loosely following them.
s = np.round(rng.beta(2.0, 3.0, 80), 2)
lab = (rng.random(80) < 0.15 + 0.7 * s).astype(int)
with open(out / "pr_scores.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["score", "label"])
    for a, b in zip(s, lab):
        w.writerow([repr(float(a)), int(b)])
p, r, t = precision_recall_curve(lab, s)
with open(out / "pr_curve.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["threshold", "precision", "recall"])
    for i in range(len(p)):
        w.writerow([repr(float(t[i])) if i < len(t) else "", repr(float(p[i])), repr(float(r[i]))])
with open(out / "pr_metrics.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["threshold", "precision", "recall", "f1", "accuracy", "average_precision"])
    ap = average_precision_score(lab, s)
    for th in [0.2, 0.35, 0.5, 0.65, 0.99]:
        pred = (s >= th).astype(int)
        pp, rr, ff, _ = precision_recall_fscore_support(lab, pred, average="binary",
                                                        zero_division=0)
        w.writerow([th, repr(float(pp)), repr(float(rr)), repr(float(ff)),
                    repr(float(accuracy_score(lab, pred))), repr(float(ap))])
