#!/usr/bin/env python3
"""Reference fixture for the near-collinearity warning of `ogive fit` (tests/fit_cli.rs).

Writes, next to this script:

  near_collinear.csv   400 rows simulated here (numpy, fixed seed): x continuous, z = x plus a
                       little noise (so x and z are nearly, not exactly, collinear), w
                       independent, y a logit draw on x and w
  near_collinear.json  numpy.linalg.cond of the design [1, x, z, w] with each column scaled to
                       unit length (the scaling of Belsley, Kuh and Welsch's condition number),
                       and of the design [1, x, w] without z; with z, the variance-
                       decomposition proportions of each term on the dimension of the largest
                       condition index (from numpy.linalg.svd of the same scaled design), and
                       the terms whose proportion there exceeds 0.5

Simulated data are input only: the check values are numpy's.

Run from the repository root:  python3 tests/reference/fit/make_collinear_fixture.py
Needs numpy (pip). The output is deterministic.
"""

import json
import os

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))


def scaled_condition(columns):
    design = np.column_stack(columns)
    design = design / np.linalg.norm(design, axis=0)
    return float(np.linalg.cond(design))


def variance_proportions(columns):
    design = np.column_stack(columns)
    design = design / np.linalg.norm(design, axis=0)
    _, singular, vt = np.linalg.svd(design, full_matrices=False)
    phi = vt.T**2 / singular**2
    proportions = phi / phi.sum(axis=1, keepdims=True)
    return proportions[:, int(np.argmin(singular))]


def main():
    rng = np.random.default_rng(20260501)
    n = 400
    x = np.round(rng.normal(5.0, 1.0, n), 4)
    z = np.round(x + rng.normal(0.0, 0.02, n), 4)
    w = np.round(rng.normal(0.0, 1.0, n), 4)
    eta = -0.5 + 0.3 * (x - 5.0) + 0.8 * w
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-eta))).astype(int)
    with open(os.path.join(HERE, "near_collinear.csv"), "w") as out:
        out.write("y,x,z,w\n")
        for row in zip(y, x, z, w):
            out.write(f"{row[0]},{row[1]:.4f},{row[2]:.4f},{row[3]:.4f}\n")
    ones = np.ones(n)
    fixture = {
        "source": "numpy.linalg.cond of the unit-length-scaled design, numpy "
        + np.__version__,
        "terms_with_z": ["intercept", "x", "z", "w"],
        "condition_with_z": scaled_condition([ones, x, z, w]),
        "proportions_with_z": [float(p) for p in variance_proportions([ones, x, z, w])],
        "involved_with_z": [
            term
            for term, p in zip(
                ["intercept", "x", "z", "w"], variance_proportions([ones, x, z, w])
            )
            if p > 0.5
        ],
        "terms_without_z": ["intercept", "x", "w"],
        "condition_without_z": scaled_condition([ones, x, w]),
    }
    with open(os.path.join(HERE, "near_collinear.json"), "w") as out:
        json.dump(fixture, out, indent=2)
        out.write("\n")


if __name__ == "__main__":
    main()
