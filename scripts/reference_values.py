#!/usr/bin/env python3
"""Writes the outside reference values that `cargo test` compares against.

Run once after changing the grids (needs `pip install scipy h3==4.*`); the CSVs are committed so
tests need no Python.
  tests/reference/nbinom_tail.csv  P(X >= k) of the negative binomial, from scipy.stats.nbinom
  tests/reference/poisson_tail.csv P(X >= k) of the Poisson distribution, from scipy.stats.poisson
  tests/reference/h3_cells.csv     H3 cell ids of sample points, from the H3 reference bindings
"""
import csv
import pathlib

import h3
from scipy.stats import nbinom, poisson

out = pathlib.Path(__file__).resolve().parent.parent / "tests" / "reference"
out.mkdir(parents=True, exist_ok=True)

with open(out / "nbinom_tail.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["k", "r", "p", "tail"])
    for r in [0.3, 1.0, 2.5, 14.0, 60.0, 400.0]:
        for p in [0.5, 0.8, 0.95, 0.99]:
            for k in [0, 1, 2, 5, 10, 30, 100, 400]:
                # P(X >= k) = sf(k - 1) in SciPy's parameterisation (failures before r successes).
                w.writerow([k, r, p, repr(float(nbinom.sf(k - 1, r, p)))])

with open(out / "poisson_tail.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["k", "lambda", "tail"])
    for lam in [0.01, 0.3, 1.0, 4.0, 25.0, 300.0]:
        for k in [0, 1, 2, 5, 10, 30, 100, 400]:
            w.writerow([k, lam, repr(float(poisson.sf(k - 1, lam)))])

points = [
    (45.2, -33.6), (45.21234, -33.58765), (0.0, 0.0), (51.5, -0.12), (-33.86, 151.2),
    (64.1, -21.9), (-54.8, -68.3), (89.9, 10.0), (-89.9, -170.0), (10.0, 179.9999),
    (10.0, -179.9999), (35.68, 139.76),
]
with open(out / "h3_cells.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["lat", "lon", "res", "cell"])
    for lat, lon in points:
        for res in [5, 6, 7, 8, 9, 10]:
            w.writerow([lat, lon, res, h3.latlng_to_cell(lat, lon, res)])
print("wrote", out)
