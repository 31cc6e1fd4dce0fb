#!/usr/bin/env python3
"""Reference values for ogive's calibration figures (tests/monitoring.rs).

Writes calibration.json beside this script: predictions and outcomes simulated from a stated
recipe, with the figures computed by the reference libraries:

  brier_score      sklearn.metrics.brier_score_loss(y, p)
  log_loss         sklearn.metrics.log_loss(y, p)
  roc_auc          sklearn.metrics.roc_auc_score(y, p)
  in_the_large     numpy: mean(y) - mean(p)
  slope, intercept statsmodels Logit(y, add_constant(logit(p))).fit(): the coefficient of
                   logit(p) and the constant

The data are simulation input, not check values: each case draws predictions p from a stated
distribution and outcomes y ~ Bernoulli(expit(a + b * logit(p))), so the slope fitted by
statsmodels is near b. One case rounds p to two decimals so that many predictions tie (the
AUC counts ties half). No prediction lies within 1e-15 of 0 or 1, where ogive's clip bound
(1e-15) and scikit-learn's (float64 eps) would differ.

Run from the repository root:  python3 tests/reference/monitoring/make_fixtures.py
"""

import json
import pathlib

import numpy as np
import sklearn
import statsmodels
import statsmodels.api as sm
from scipy.special import expit, logit
from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score


def case(name, recipe, p, a, b, rng):
    y = rng.binomial(1, expit(a + b * logit(p)))
    fit = sm.Logit(y, sm.add_constant(logit(p))).fit(disp=0, method="newton", tol=1e-14, maxiter=100)
    return {
        "name": name,
        "recipe": recipe,
        "predictions": [float(v) for v in p],
        "outcomes": [int(v) for v in y],
        "brier_score": float(brier_score_loss(y, p)),
        "log_loss": float(log_loss(y, p)),
        "roc_auc": float(roc_auc_score(y, p)),
        "in_the_large": float(np.mean(y) - np.mean(p)),
        "calibration_intercept": float(fit.params[0]),
        "calibration_slope": float(fit.params[1]),
    }


def main():
    rng = np.random.default_rng(20240607)
    cases = []

    p = expit(rng.normal(-1.0, 1.2, size=400))
    cases.append(case(
        "well calibrated",
        "p = expit(N(-1, 1.2^2)), n = 400; y ~ Bernoulli(p)",
        p, 0.0, 1.0, rng))

    p = expit(rng.normal(0.0, 2.0, size=600))
    cases.append(case(
        "over-confident",
        "p = expit(N(0, 2^2)), n = 600; y ~ Bernoulli(expit(0.3 + 0.6 logit p))",
        p, 0.3, 0.6, rng))

    p = np.clip(np.round(rng.beta(2.0, 5.0, size=300), 2), 0.01, 0.99)
    cases.append(case(
        "tied predictions",
        "p = clip(round(Beta(2, 5), 2), 0.01, 0.99), n = 300; y ~ Bernoulli(expit(-0.2 + 1.3 logit p))",
        p, -0.2, 1.3, rng))

    p = expit(rng.normal(-4.0, 3.0, size=500))
    cases.append(case(
        "deep tails",
        "p = expit(N(-4, 3^2)), n = 500 (predictions from below 1e-6 to above 0.99); y ~ Bernoulli(p)",
        p, 0.0, 1.0, rng))

    out = {
        "generated_by": "tests/reference/monitoring/make_fixtures.py",
        "versions": {
            "numpy": np.__version__,
            "scikit-learn": sklearn.__version__,
            "statsmodels": statsmodels.__version__,
        },
        "cases": cases,
    }
    path = pathlib.Path(__file__).with_name("calibration.json")
    path.write_text(json.dumps(out, indent=1) + "\n")
    print(f"wrote {path} ({len(cases)} cases)")


if __name__ == "__main__":
    main()
