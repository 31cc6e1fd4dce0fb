#!/usr/bin/env python3
"""Reference values for `ogive evaluate`'s statistics (tests/evaluate_reference.rs).

Writes evaluate.json beside this script. Each case holds labelled rows simulated from a stated
recipe (the rows are test input) and, for one or two models' probabilities on those rows, the
figures computed by libraries outside the project:

  brier            sklearn.metrics.brier_score_loss(y, p)
  log_loss         sklearn.metrics.log_loss(y, p)
  *_std_error      numpy std(ddof=1) / sqrt(N) of the per-row (p - y)^2 and log losses
  event_rate_wilson  statsmodels proportion_confint(events, N, alpha, method='wilson')
  auc              sklearn.metrics.roc_auc_score(y, p)
  auc_std_error    numpy, DeLong's variance by the fast midrank algorithm of Sun & Xu (2014),
                   written here from the paper (delong_placements below), not from ogive
  intercept        statsmodels GLM(y, ones, Binomial(), offset=logit(p)).fit(method='newton'):
                   params[0], bse[0]
  slope            statsmodels GLM(y, [1, logit(p)], Binomial()).fit(method='newton'):
                   params[1], bse[1]
  reliability      sklearn.calibration.calibration_curve(y, p, n_bins=10, strategy='uniform')
                   for the observed share and mean probability of each non-empty bin, numpy
                   bincount of the same bin ids for the counts, and
                   statsmodels proportion_confint(k, n, alpha, method='wilson') for the intervals
  murphy           numpy sums over the same bins: REL, RES, UNC and the within-bin remainder
  hosmer_lemeshow  numpy, written here from Hosmer & Lemeshow (1980): rows sorted by p (a
                   non-event before an event at equal p), cut at floor(g N / 10), statistic
                   sum (O - E)^2 / (n pbar (1 - pbar)), p-value scipy.stats.chi2.sf(H, G - 2)
  paired           numpy per-row differences first - second of the Brier and log-loss terms
                   (mean, std(ddof=1)/sqrt(N)), and DeLong's paired test from the same
                   placements (covariance of the two AUCs), p-values from scipy.stats.norm

A last section, "spector", evaluates statsmodels' own logit and probit fits of the Spector &
Mazzeo (1980) data that statsmodels ships (GRADE on GPA, TUCE, PSI; the same fits as
tests/reference/describe/spector.json) on their 32 training rows, logit against probit, so that
`ogive evaluate` run as a process can be checked end to end, its ROC plot against
sklearn.metrics.roc_curve.

Intervals are at level 0.95 with scipy.stats.norm.ppf(0.975). No probability lies within 1e-15
of 0 or 1, where ogive's clip bound and scikit-learn's would differ.

Run from the repository root:  python3 tests/reference/evaluate/make_evaluate_fixtures.py
"""

import json
import pathlib

import numpy as np
import scipy
import sklearn
import statsmodels
import statsmodels.api as sm
from scipy.special import expit, logit
from scipy.stats import chi2, norm, rankdata
from sklearn.calibration import calibration_curve
from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score, roc_curve
from statsmodels.stats.proportion import proportion_confint

LEVEL = 0.95
Q = float(norm.ppf(0.5 + LEVEL / 2))
BINS = 10
GROUPS = 10


def delong_placements(y, p):
    """Sun & Xu (2014), Algorithm 1: V10 for the m events and V01 for the n non-events from
    midranks: V10_i = (R_i - R^X_i) / n, V01_j = 1 - (R_j - R^Y_j) / m."""
    x, z = p[y == 1], p[y == 0]
    m, n = len(x), len(z)
    both = np.concatenate([x, z])
    ranks = rankdata(both)  # midranks
    tx, tz = rankdata(x), rankdata(z)
    v10 = (ranks[:m] - tx) / n
    v01 = 1.0 - (ranks[m:] - tz) / m
    return v10, v01


def delong_variance(first, second):
    """DeLong's covariance of two AUCs from their placements: S10/m + S01/n."""
    (a10, a01), (b10, b01) = first, second
    s10 = np.cov(a10, b10, ddof=1)[0, 1]
    s01 = np.cov(a01, b01, ddof=1)[0, 1]
    return s10 / len(a10) + s01 / len(a01)


def bin_ids(p):
    # The binning calibration_curve uses for strategy='uniform'.
    edges = np.linspace(0.0, 1.0, BINS + 1)
    return np.searchsorted(edges[1:-1], p)


def reliability(y, p):
    ids = bin_ids(p)
    counts = np.bincount(ids, minlength=BINS)
    events = np.bincount(ids, weights=y, minlength=BINS)
    prob_true, prob_pred = calibration_curve(y, p, n_bins=BINS, strategy="uniform")
    rows, filled = [], 0
    for k in range(BINS):
        if counts[k] == 0:
            rows.append({"bin": k, "count": 0, "events": 0})
            continue
        lower, upper = proportion_confint(int(events[k]), int(counts[k]), alpha=1 - LEVEL, method="wilson")
        rows.append({
            "bin": k,
            "count": int(counts[k]),
            "events": int(events[k]),
            "observed": float(prob_true[filled]),
            "mean_probability": float(prob_pred[filled]),
            "wilson": [float(lower), float(upper)],
        })
        filled += 1
    return rows


def murphy(y, p):
    ids = bin_ids(p)
    total = len(y)
    overall = y.mean()
    rel = res = within_var = within_cov = 0.0
    for k in range(BINS):
        mask = ids == k
        if not mask.any():
            continue
        pk, yk = p[mask], y[mask]
        nk = mask.sum()
        rel += nk * (pk.mean() - yk.mean()) ** 2
        res += nk * (yk.mean() - overall) ** 2
        within_var += ((pk - pk.mean()) ** 2).sum()
        within_cov += ((yk - yk.mean()) * (pk - pk.mean())).sum()
    return {
        "reliability": rel / total,
        "resolution": res / total,
        "uncertainty": overall * (1 - overall),
        "within_bin": (within_var - 2 * within_cov) / total,
    }


def hosmer_lemeshow(y, p):
    order = np.lexsort((y, p))  # by p, then y: a non-event before an event at equal p
    ps, ys = p[order], y[order]
    total = len(y)
    groups, statistic = [], 0.0
    for g in range(GROUPS):
        lo, hi = g * total // GROUPS, (g + 1) * total // GROUPS
        if hi == lo:
            continue
        n = hi - lo
        observed, expected = ys[lo:hi].sum(), ps[lo:hi].sum()
        pbar = expected / n
        statistic += (observed - expected) ** 2 / (n * pbar * (1 - pbar))
        groups.append({"rows": int(n), "observed": int(observed), "expected": float(expected)})
    df = len(groups) - 2
    return {
        "statistic": float(statistic),
        "degrees_of_freedom": df,
        "p_value": float(chi2.sf(statistic, df)),
        "groups": groups,
    }


def calibration(y, p):
    x = logit(p)
    ones = np.ones_like(x)
    # Newton rather than the default IRLS: IRLS reports the standard errors of its last
    # weighted least-squares step, taken at the previous iterate's weights (about 1e-8 off the
    # information at the maximum); Newton's come from the Hessian at the estimate.
    fit = dict(method="newton", tol=1e-14, maxiter=100)
    intercept = sm.GLM(y, ones[:, None], family=sm.families.Binomial(), offset=x).fit(**fit)
    slope = sm.GLM(y, np.column_stack([ones, x]), family=sm.families.Binomial()).fit(**fit)
    return (
        {"estimate": float(intercept.params[0]), "std_error": float(intercept.bse[0])},
        {"estimate": float(slope.params[1]), "std_error": float(slope.bse[1])},
    )


def figures(y, p):
    v10, v01 = delong_placements(y, p)
    auc_var = delong_variance((v10, v01), (v10, v01))
    intercept, slope = calibration(y, p)
    squared = (p - y) ** 2
    losses = -(y * np.log(p) + (1 - y) * np.log(1 - p))
    rate_lower, rate_upper = proportion_confint(int(y.sum()), len(y), alpha=1 - LEVEL, method="wilson")
    return {
        "brier": float(brier_score_loss(y, p)),
        "brier_std_error": float(squared.std(ddof=1) / np.sqrt(len(y))),
        "log_loss": float(log_loss(y, p)),
        "log_loss_std_error": float(losses.std(ddof=1) / np.sqrt(len(y))),
        "event_rate_wilson": [float(rate_lower), float(rate_upper)],
        "auc": float(roc_auc_score(y, p)),
        "auc_from_placements": float(v10.mean()),
        "auc_std_error": float(np.sqrt(auc_var)),
        "calibration_intercept": intercept,
        "calibration_slope": slope,
        "reliability": reliability(y, p),
        "murphy": murphy(y, p),
        "hosmer_lemeshow": hosmer_lemeshow(y, p),
    }


def mean_difference(d):
    mean = d.mean()
    se = d.std(ddof=1) / np.sqrt(len(d))
    return {
        "mean": float(mean),
        "std_error": float(se),
        "interval": [float(mean - Q * se), float(mean + Q * se)],
        "p_value": float(2 * norm.sf(abs(mean / se))),
    }


def paired(y, first, second):
    a, b = delong_placements(y, first), delong_placements(y, second)
    var_a, var_b, cov = delong_variance(a, a), delong_variance(b, b), delong_variance(a, b)
    difference = roc_auc_score(y, first) - roc_auc_score(y, second)
    se = np.sqrt(var_a + var_b - 2 * cov)
    z = difference / se

    def row_log_loss(p):
        return -(y * np.log(p) + (1 - y) * np.log(1 - p))

    return {
        "auc": {
            "difference": float(difference),
            "std_error": float(se),
            "interval": [float(difference - Q * se), float(difference + Q * se)],
            "correlation": float(cov / np.sqrt(var_a * var_b)),
            "z": float(z),
            "p_value": float(2 * norm.sf(abs(z))),
        },
        "brier": mean_difference((first - y) ** 2 - (second - y) ** 2),
        "log_loss": mean_difference(row_log_loss(first) - row_log_loss(second)),
    }


def case(name, recipe, y, first, second=None):
    out = {
        "name": name,
        "recipe": recipe,
        "outcomes": [int(v) for v in y],
        "first": {"probabilities": [float(v) for v in first], "figures": figures(y, first)},
    }
    if second is not None:
        out["second"] = {"probabilities": [float(v) for v in second], "figures": figures(y, second)}
        out["paired"] = paired(y, first, second)
    return out


def main():
    rng = np.random.default_rng(20261202)
    cases = []

    # Two covariates; the first model knows both, the second only the first.
    n = 3000
    x1, x2 = rng.normal(size=n), rng.normal(size=n)
    truth = expit(-0.8 + 1.1 * x1 + 0.7 * x2)
    y = rng.binomial(1, truth).astype(float)
    cases.append(case(
        "informed against reduced",
        "x1, x2 ~ N(0, 1), n = 3000; y ~ Bernoulli(expit(-0.8 + 1.1 x1 + 0.7 x2)); "
        "first p = expit(-0.8 + 1.1 x1 + 0.7 x2), second p = expit(-0.7 + 0.95 x1)",
        y, truth, expit(-0.7 + 0.95 * x1)))

    # Two nearly equal models on few rows: no difference should be shown.
    n = 400
    x = rng.normal(size=n)
    y = rng.binomial(1, expit(0.2 + 0.9 * x)).astype(float)
    cases.append(case(
        "near twins",
        "x ~ N(0, 1), n = 400; y ~ Bernoulli(expit(0.2 + 0.9 x)); "
        "first p = expit(0.2 + 0.9 x), second p = expit(0.19 + 0.9 x + N(0, 0.02^2))",
        y, expit(0.2 + 0.9 * x), expit(0.19 + 0.9 * x + rng.normal(0, 0.02, size=n))))

    # An over-confident model: slope well below 1.
    n = 1500
    p = expit(rng.normal(0.0, 2.0, size=n))
    y = rng.binomial(1, expit(0.3 + 0.6 * logit(p))).astype(float)
    cases.append(case(
        "over-confident",
        "p = expit(N(0, 2^2)), n = 1500; y ~ Bernoulli(expit(0.3 + 0.6 logit p))",
        y, p))

    # Probabilities on a grid of hundredths: many ties, and values on the bin edges.
    n = 1200
    p = np.clip(np.round(rng.beta(2.0, 4.0, size=n), 2), 0.01, 0.99)
    y = rng.binomial(1, expit(-0.2 + 1.3 * logit(p))).astype(float)
    cases.append(case(
        "tied on a grid",
        "p = clip(round(Beta(2, 4), 2), 0.01, 0.99), n = 1200; y ~ Bernoulli(expit(-0.2 + 1.3 logit p))",
        y, p, np.clip(np.round(p + rng.normal(0, 0.05, size=n), 2), 0.01, 0.99)))

    # One forecast value per bin: Murphy's identity REL - RES + UNC = Brier holds exactly.
    n = 2000
    p = rng.choice(np.arange(BINS) / BINS + 0.05, size=n, p=[0.2, 0.16, 0.13, 0.11, 0.1, 0.09, 0.07, 0.06, 0.05, 0.03])
    y = rng.binomial(1, np.clip(p + 0.03, 0, 1)).astype(float)
    cases.append(case(
        "binned forecasts",
        "p drawn from {0.05, 0.15, ..., 0.95} (weights .2 .16 .13 .11 .1 .09 .07 .06 .05 .03), "
        "n = 2000; y ~ Bernoulli(min(p + 0.03, 1))",
        y, p))

    data = sm.datasets.spector.load_pandas().data
    X = sm.add_constant(data[["GPA", "TUCE", "PSI"]])
    y = data["GRADE"].to_numpy(dtype=float)
    fits = {
        link: model(data["GRADE"], X).fit(disp=0, method="newton", tol=1e-14, maxiter=100)
        for link, model in (("logit", sm.Logit), ("probit", sm.Probit))
    }
    logit_p, probit_p = (fits[k].predict(X).to_numpy() for k in ("logit", "probit"))
    spector = {
        "recipe": "statsmodels.datasets.spector; Logit and Probit of GRADE on const, GPA, TUCE, PSI "
                  "(Newton, tol 1e-14); first = logit, second = probit; the 32 training rows",
        "outcomes": [int(v) for v in y],
        "first": {"probabilities": [float(v) for v in logit_p], "figures": figures(y, logit_p)},
        "second": {"probabilities": [float(v) for v in probit_p], "figures": figures(y, probit_p)},
        "paired": paired(y, logit_p, probit_p),
        # sklearn.metrics.roc_curve(y, p, drop_intermediate=False): every threshold's point.
        "roc": {
            name: [[float(a), float(b)] for a, b in zip(*roc_curve(y, p, drop_intermediate=False)[:2])]
            for name, p in (("first", logit_p), ("second", probit_p))
        },
    }

    out = {
        "generated_by": "tests/reference/evaluate/make_evaluate_fixtures.py",
        "level": LEVEL,
        "versions": {
            "numpy": np.__version__,
            "scipy": scipy.__version__,
            "scikit-learn": sklearn.__version__,
            "statsmodels": statsmodels.__version__,
        },
        "cases": cases,
        "spector": spector,
    }
    path = pathlib.Path(__file__).with_name("evaluate.json")
    path.write_text(json.dumps(out, indent=1) + "\n")
    print(f"wrote {path} ({len(cases)} cases)")


if __name__ == "__main__":
    main()
