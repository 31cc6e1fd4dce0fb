#!/usr/bin/env python3
"""Reference values for the figures taken from ogive's fleet counters (tests/monitoring.rs).

Writes fleet.json beside this script. For each demo model, the probabilities of its model
file (model-files/NAME/versions/1.0.0.json) on its demo data (demo-data/NAME.csv) are computed
here with numpy and scipy from the file's terms and link, then:

  exact_auc   sklearn.metrics.roc_auc_score(y, p)
  binned_auc  the AUC of the predictions put in 100 bins, bin k (from 0) holding
              k/100 < p <= (k+1)/100 (the first also p = 0), pairs in one bin counted half:
              sum_k pos_k * (neg_below_k + neg_k / 2) / (n1 * n0)
  tie_bound   half the share of positive-negative pairs that share a bin:
              sum_k pos_k * neg_k / 2 / (n1 * n0), the most the binned AUC can differ from
              the exact one
  brier_score sklearn.metrics.brier_score_loss(y, p)
  log_loss    sklearn.metrics.log_loss(y, p)
  in_the_large  numpy: mean(y) - mean(p)
  reliability sklearn.calibration.calibration_curve(y, p, n_bins=10, strategy="uniform"):
              the mean outcome (prob_true) and mean prediction (prob_pred) of each non-empty
              tenth, k/10 < p <= (k+1)/10 (sklearn puts p on an edge in the lower bin, as
              ogive does), with numpy's count of predictions in each

No probability lies within 1e-9 of a bin edge (checked), so numpy's and ogive's probabilities,
which agree to about 1e-15, put every row in the same bin.

Run from the repository root:  python3 tests/reference/monitoring/make_fleet_fixture.py
"""

import csv
import json
import math
import pathlib

import numpy as np
import scipy
import sklearn
from scipy.stats import norm
from sklearn.calibration import calibration_curve
from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score

DEMOS = [("lease-arrears", "arrears_60d"), ("rebate-uptake", "took_rebate")]
BINS = 100


def term_value(row, term):
    if term == "intercept":
        return 1.0
    if term.startswith("log(") and term.endswith(")"):
        return math.log(float(row[term[4:-1]]))
    if term.endswith("^2"):
        return float(row[term[:-2]]) ** 2
    if "*" in term:
        left, right = term.split("*")
        return term_value(row, left) * term_value(row, right)
    if "=" in term:
        covariate, level = term.split("=", 1)
        return 1.0 if row[covariate] == level else 0.0
    return float(row[term])


def probabilities(model, rows):
    eta = np.zeros(len(rows))
    for t in model["terms"]:
        eta += t["coefficient"] * np.array([term_value(r, t["term"]) for r in rows])
    links = {"logit": scipy.special.expit, "probit": norm.cdf}
    return links[model["link"]](eta)


def binned(p, y):
    edges = np.arange(1, BINS) / BINS
    k = np.searchsorted(edges, p, side="left")
    pos = np.bincount(k[y == 1], minlength=BINS).astype(float)
    neg = np.bincount(k[y == 0], minlength=BINS).astype(float)
    below = np.concatenate([[0.0], np.cumsum(neg)[:-1]])
    pairs = pos.sum() * neg.sum()
    return float((pos * (below + neg / 2)).sum() / pairs), float((pos * neg / 2).sum() / pairs)


def main():
    root = pathlib.Path(__file__).resolve().parents[3]
    cases = []
    for name, outcome in DEMOS:
        model = json.loads((root / f"model-files/{name}/versions/1.0.0.json").read_text())
        with open(root / f"demo-data/{name}.csv", newline="") as f:
            rows = list(csv.DictReader(f))
        y = np.array([int(r[outcome]) for r in rows])
        p = probabilities(model, rows)
        binned_auc, tie_bound = binned(p, y)
        edges = np.arange(1, BINS) / BINS
        assert np.abs(p[:, None] - edges[None, :]).min() > 1e-9, f"{name}: a probability on an edge"
        prob_true, prob_pred = calibration_curve(y, p, n_bins=10, strategy="uniform")
        tenths = np.searchsorted(np.arange(1, 10) / 10, p, side="left")
        counts = np.bincount(tenths, minlength=10)
        cases.append({
            "model": name,
            "outcome": outcome,
            "rows": len(rows),
            "exact_auc": float(roc_auc_score(y, p)),
            "binned_auc": binned_auc,
            "tie_bound": tie_bound,
            "brier_score": float(brier_score_loss(y, p)),
            "log_loss": float(log_loss(y, p)),
            "in_the_large": float(np.mean(y) - np.mean(p)),
            "reliability": [
                {"tenth": int(k), "count": int(counts[k]), "prob_true": float(t), "prob_pred": float(q)}
                for k, t, q in zip(np.flatnonzero(counts), prob_true, prob_pred)
            ],
        })
    out = {
        "generated_by": "tests/reference/monitoring/make_fleet_fixture.py",
        "versions": {"numpy": np.__version__, "scipy": scipy.__version__,
                     "scikit-learn": sklearn.__version__},
        "bins": BINS,
        "cases": cases,
    }
    path = pathlib.Path(__file__).with_name("fleet.json")
    path.write_text(json.dumps(out, indent=1) + "\n")


if __name__ == "__main__":
    main()
