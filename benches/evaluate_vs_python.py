"""Helper for benches/evaluate_vs_python.sh: the models, the labelled data and the Python
baseline that computes the same figures as `ogive evaluate --against`.

  make-models A.json B.json    two ogive model files (logit): A on x0..x9, B on x0..x4, with
                               invented coefficients and no covariance
  make-data ROWS CSV           ROWS labelled rows: x0..x9 and y ~ Bernoulli(expit(A's index)),
                               streamed in chunks
  python A.json B.json CSV OUT the baseline: pandas.read_csv, both models' probabilities with
                               numpy, then per model scikit-learn (roc_auc_score,
                               brier_score_loss, log_loss, calibration_curve), statsmodels
                               (GLM Binomial with offset logit(p); with logit(p) as regressor;
                               proportion_confint wilson), numpy DeLong (Sun & Xu 2014 midranks)
                               and Hosmer-Lemeshow deciles, and the paired comparison; the
                               headline figures written to OUT as JSON
  measure NAME -- CMD...       run CMD, print its wall time and its own peak resident memory
  compare OGIVE.json PY.json   check that the two agree on the headline figures (rel 1e-6)

The data and coefficients are invented (this is a speed benchmark, not a check of any value).
"""

import json
import os
import subprocess
import sys
import time

import numpy as np

COVARIATES = [f"x{i}" for i in range(10)]
A = [-1.0, 0.8, -0.5, 0.3, 0.25, -0.2, 0.6, -0.35, 0.15, 0.45, -0.1]
B = [-0.95, 0.75, -0.45, 0.3, 0.2, -0.2]


def model(name, coefficients):
    used = COVARIATES[: len(coefficients) - 1]
    return {
        "format": "ogive-model",
        "format_version": 1,
        "name": name,
        "version": "1",
        "description": "Benchmark model with invented coefficients",
        "outcome": {"name": "y", "meaning": "an invented outcome"},
        "link": "logit",
        "covariates": [
            {"name": c, "kind": "continuous",
             "training": {"min": -6.0, "max": 6.0, "mean": 0.0, "std_dev": 1.0}}
            for c in used
        ],
        "terms": [{"term": "intercept", "coefficient": coefficients[0]}]
        + [{"term": c, "coefficient": b} for c, b in zip(used, coefficients[1:])],
        "provenance": {
            "fitted_by": "benches/evaluate_vs_python.py (coefficients written by hand)",
            "fitted_at": "2025-01-01T00:00:00Z",
            "observations": 50000,
        },
    }


def make_models(a_path, b_path):
    for path, name, coefficients in ((a_path, "bench-a", A), (b_path, "bench-b", B)):
        with open(path, "w") as out:
            json.dump(model(name, coefficients), out, indent=1)


def make_data(rows, path, seed=3):
    rng = np.random.default_rng(seed)
    chunk = 200_000
    with open(path, "w") as out:
        out.write(",".join(COVARIATES) + ",y\n")
        done = 0
        while done < rows:
            n = min(chunk, rows - done)
            x = rng.normal(size=(n, len(COVARIATES)))
            z = A[0] + x @ np.array(A[1:])
            y = rng.random(n) < 1.0 / (1.0 + np.exp(-z))
            lines = [",".join(f"{v:.6f}" for v in row) + f",{int(o)}" for row, o in zip(x.tolist(), y)]
            out.write("\n".join(lines))
            out.write("\n")
            done += n


def probabilities(frame, path):
    with open(path) as f:
        m = json.load(f)
    names = [c["name"] for c in m["covariates"]]
    beta = np.array([t["coefficient"] for t in m["terms"]])
    x = np.column_stack([np.ones(len(frame))] + [frame[n].to_numpy(float) for n in names])
    return 1.0 / (1.0 + np.exp(-(x @ beta)))


def placements(y, p):
    from scipy.stats import rankdata

    x, z = p[y == 1], p[y == 0]
    m, n = len(x), len(z)
    ranks = rankdata(np.concatenate([x, z]))
    return (ranks[:m] - rankdata(x)) / n, 1.0 - (ranks[m:] - rankdata(z)) / m


def delong(a, b):
    return (np.cov(a[0], b[0])[0, 1] / len(a[0])) + (np.cov(a[1], b[1])[0, 1] / len(a[1]))


def figures(y, p, q):
    import statsmodels.api as sm
    from scipy.special import logit
    from scipy.stats import chi2
    from sklearn.calibration import calibration_curve
    from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score
    from statsmodels.stats.proportion import proportion_confint

    v = placements(y, p)
    x = logit(p)
    ones = np.ones_like(x)
    fit = dict(method="newton", tol=1e-10, maxiter=100)
    intercept = sm.GLM(y, ones[:, None], family=sm.families.Binomial(), offset=x).fit(**fit)
    slope = sm.GLM(y, np.column_stack([ones, x]), family=sm.families.Binomial()).fit(**fit)
    prob_true, prob_pred = calibration_curve(y, p, n_bins=10, strategy="uniform")
    ids = np.searchsorted(np.linspace(0, 1, 11)[1:-1], p)
    counts = np.bincount(ids, minlength=10)
    events = np.bincount(ids, weights=y, minlength=10)
    wilson = [proportion_confint(int(k), int(n), alpha=0.05, method="wilson")
              for k, n in zip(events, counts) if n > 0]
    order = np.lexsort((y, p))
    ps, ys = p[order], y[order]
    statistic, total = 0.0, len(y)
    for g in range(10):
        lo, hi = g * total // 10, (g + 1) * total // 10
        e, o, n = ps[lo:hi].sum(), ys[lo:hi].sum(), hi - lo
        statistic += (o - e) ** 2 / (e * (1 - e / n))
    squared = (p - y) ** 2
    return {
        "auc": float(roc_auc_score(y, p)),
        "auc_std_error": float(np.sqrt(delong(v, v))),
        "brier": float(brier_score_loss(y, p)),
        "brier_std_error": float(squared.std(ddof=1) / np.sqrt(total)),
        "log_loss": float(log_loss(y, p)),
        "calibration_intercept": float(intercept.params[0]),
        "calibration_slope": float(slope.params[1]),
        "hosmer_lemeshow": float(statistic),
        "hosmer_lemeshow_p": float(chi2.sf(statistic, 8)),
        "reliability_observed": [float(t) for t in prob_true],
        "wilson_lower": [float(w[0]) for w in wilson],
    }, v


def python_baseline(a_path, b_path, data_path, out_path):
    import pandas as pd
    from scipy.stats import norm

    q = float(norm.ppf(0.975))
    frame = pd.read_csv(data_path)
    y = frame["y"].to_numpy(float)
    p_a, p_b = probabilities(frame, a_path), probabilities(frame, b_path)
    first, v_a = figures(y, p_a, q)
    second, v_b = figures(y, p_b, q)
    se = np.sqrt(delong(v_a, v_a) + delong(v_b, v_b) - 2 * delong(v_a, v_b))
    d_brier = (p_a - y) ** 2 - (p_b - y) ** 2
    loss = lambda p: -(y * np.log(p) + (1 - y) * np.log(1 - p))
    d_loss = loss(p_a) - loss(p_b)
    out = {
        "first": first,
        "second": second,
        "auc_difference": first["auc"] - second["auc"],
        "auc_difference_std_error": float(se),
        "brier_difference": float(d_brier.mean()),
        "log_loss_difference": float(d_loss.mean()),
    }
    with open(out_path, "w") as f:
        json.dump(out, f, indent=1)


def measure(name, command):
    """Run one process; its own peak resident set size comes from wait4's resource usage."""
    start = time.perf_counter()
    child = subprocess.Popen(command, stdout=subprocess.DEVNULL)
    _, status, usage = os.wait4(child.pid, 0)
    seconds = time.perf_counter() - start
    code = os.waitstatus_to_exitcode(status)
    # Linux reports ru_maxrss in KiB.
    print(f"{name}\t{seconds:.3f}\t{usage.ru_maxrss / 1024:.1f}\t{code}")
    sys.exit(code)


def compare(ogive_path, python_path):
    with open(ogive_path) as f:
        o = json.load(f)
    with open(python_path) as f:
        p = json.load(f)
    pairs = []
    for model, key in zip(o["models"], ("first", "second")):
        f, r = model["figures"], p[key]
        pairs += [
            (f"{key} AUC", f["auc"]["estimate"], r["auc"]),
            (f"{key} AUC SE", f["auc"]["std_error"], r["auc_std_error"]),
            (f"{key} Brier", f["brier"], r["brier"]),
            (f"{key} Brier SE", f["brier_interval"]["std_error"], r["brier_std_error"]),
            (f"{key} log loss", f["log_loss"], r["log_loss"]),
            (f"{key} intercept", f["calibration_intercept"]["estimate"], r["calibration_intercept"]),
            (f"{key} slope", f["calibration_slope"]["estimate"], r["calibration_slope"]),
            (f"{key} Hosmer-Lemeshow", f["hosmer_lemeshow"]["statistic"], r["hosmer_lemeshow"]),
        ]
        observed = [b["observed"] for b in f["reliability"] if b["count"] > 0]
        pairs += [(f"{key} bin observed", a, b) for a, b in zip(observed, r["reliability_observed"])]
    c = o["comparison"]
    pairs += [
        ("AUC difference", c["auc"]["difference"], p["auc_difference"]),
        ("AUC difference SE", c["auc"]["std_error"], p["auc_difference_std_error"]),
        ("Brier difference", c["brier"]["mean"], p["brier_difference"]),
        ("log-loss difference", c["log_loss"]["mean"], p["log_loss_difference"]),
    ]
    worst = max(abs(a - b) / max(abs(b), 1e-12) for _, a, b in pairs)
    print(f"{len(pairs)} figures compared; largest relative difference {worst:.2e}")
    bad = [(n, a, b) for n, a, b in pairs if abs(a - b) > 1e-6 * max(abs(b), 1e-12)]
    for n, a, b in bad:
        print(f"  DISAGREE {n}: ogive {a!r}, python {b!r}")
    if bad:
        sys.exit(1)


def main(argv):
    command = argv[1] if len(argv) > 1 else ""
    if command == "make-models":
        make_models(argv[2], argv[3])
    elif command == "make-data":
        make_data(int(argv[2]), argv[3])
    elif command == "python":
        python_baseline(argv[2], argv[3], argv[4], argv[5])
    elif command == "measure":
        assert argv[3] == "--", "usage: measure NAME -- CMD..."
        measure(argv[2], argv[4:])
    elif command == "compare":
        compare(argv[2], argv[3])
    else:
        sys.exit(__doc__)


if __name__ == "__main__":
    main(sys.argv)
