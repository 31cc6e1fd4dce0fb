"""Helper for benches/score_vs_pandas.sh: the data, the model and the pandas baseline.

  make-model MODEL             write an ogive model file: logit, intercept + 10 continuous
                               covariates x0..x9, known coefficients and a covariance
  make-data ROWS CSV [SEED]    write ROWS rows of x0..x9 plus an id column, streaming in chunks
                               (memory stays flat whatever ROWS is)
  pandas MODEL CSV OUT         the baseline: pandas.read_csv, the same probabilities, intervals,
                               derivative effects and delta-method standard errors as
                               `ogive score --effects` computed with numpy, pandas.to_csv
  measure NAME [--discard-output] -- CMD...
                               run CMD (its standard output thrown away if asked), print
                               its wall time and its own peak resident memory
  compare A.csv B.csv          check that two scored files agree column by column (rel 1e-9)

The data and coefficients are invented (this is a speed benchmark, not a check of any value).
"""

import json
import os
import subprocess
import sys
import time

import numpy as np

COVARIATES = [f"x{i}" for i in range(10)]
COEFFICIENTS = [-0.4, 0.8, -0.5, 0.3, 0.25, -0.2, 0.6, -0.35, 0.15, 0.45, -0.1]
MEANS = [0.0, 1.0, -0.5, 2.0, 0.0, 0.5, -1.0, 0.0, 1.5, 0.0]
SCALES = [1.0, 0.5, 1.5, 1.0, 2.0, 0.8, 1.2, 1.0, 0.6, 1.0]
LEVEL = 0.95


def covariance():
    """A positive-definite coefficient covariance of plausible size for ~50,000 observations."""
    k = len(COEFFICIENTS)
    rng = np.random.default_rng(7)
    a = rng.normal(size=(k, k)) * 0.004
    return (a @ a.T + np.eye(k) * 4e-4).tolist()


def make_model(path):
    covariates = []
    for name, mean, scale in zip(COVARIATES, MEANS, SCALES):
        covariates.append(
            {
                "name": name,
                "kind": "continuous",
                "training": {
                    "min": mean - 6 * scale,
                    "max": mean + 6 * scale,
                    "mean": mean,
                    "std_dev": scale,
                },
            }
        )
    terms = [{"term": "intercept", "coefficient": COEFFICIENTS[0]}]
    terms += [{"term": c, "coefficient": b} for c, b in zip(COVARIATES, COEFFICIENTS[1:])]
    model = {
        "format": "ogive-model",
        "format_version": 1,
        "name": "bench-ten",
        "version": "1",
        "description": "Benchmark model with invented coefficients",
        "outcome": {"name": "y", "meaning": "an invented outcome"},
        "link": "logit",
        "covariates": covariates,
        "terms": terms,
        "covariance": covariance(),
        "provenance": {
            "fitted_by": "benches/score_vs_pandas.py (coefficients written by hand)",
            "fitted_at": "2025-01-01T00:00:00Z",
            "observations": 50000,
        },
    }
    with open(path, "w") as out:
        json.dump(model, out, indent=1)


def make_data(rows, path, seed=1):
    rng = np.random.default_rng(seed)
    chunk = 200_000
    with open(path, "w") as out:
        out.write("id," + ",".join(COVARIATES) + "\n")
        done = 0
        while done < rows:
            n = min(chunk, rows - done)
            x = rng.normal(size=(n, len(COVARIATES))) * SCALES + MEANS
            ids = np.arange(done + 1, done + n + 1)
            lines = [
                f"{i}," + ",".join(f"{v:.6f}" for v in row) for i, row in zip(ids, x.tolist())
            ]
            out.write("\n".join(lines))
            out.write("\n")
            done += n


def normal_quantile(p):
    from scipy.special import ndtri

    return float(ndtri(p))


def pandas_score(model_path, data_path, out_path):
    import pandas as pd

    with open(model_path) as f:
        model = json.load(f)
    names = [c["name"] for c in model["covariates"]]
    beta = np.array([t["coefficient"] for t in model["terms"]])
    v = np.array(model["covariance"])
    q = normal_quantile(0.5 + LEVEL / 2)

    frame = pd.read_csv(data_path)
    x = np.column_stack([np.ones(len(frame))] + [frame[n].to_numpy(float) for n in names])
    z = x @ beta
    p = 1.0 / (1.0 + np.exp(-z))
    xv = x @ v
    index_var = np.einsum("ij,ij->i", xv, x)
    index_se = np.sqrt(np.maximum(index_var, 0.0))
    frame["probability"] = p
    frame["probability_lower"] = 1.0 / (1.0 + np.exp(-(z - q * index_se)))
    frame["probability_upper"] = 1.0 / (1.0 + np.exp(-(z + q * index_se)))
    frame["linear_index"] = z
    density = p * (1.0 - p)
    slope = density * (1.0 - 2.0 * p)
    for j, name in enumerate(names, start=1):
        # gradient = f'(z)·βⱼ·x + f(z)·eⱼ, so gᵀVg = (f'βⱼ)²·xᵀVx + 2f'βⱼ·f·(Vx)ⱼ + f²·Vⱼⱼ
        a = slope * beta[j]
        var = a * a * index_var + 2.0 * a * density * xv[:, j] + density * density * v[j, j]
        frame[f"effect_{name}"] = density * beta[j]
        frame[f"effect_{name}_se"] = np.sqrt(np.maximum(var, 0.0))
    warnings = np.full(len(frame), "", dtype=object)
    for c in model["covariates"]:
        values = frame[c["name"]].to_numpy(float)
        outside = (values < c["training"]["min"]) | (values > c["training"]["max"])
        if outside.any():
            code = "out_of_range:" + c["name"]
            warnings[outside] = [w + ";" + code if w else code for w in warnings[outside]]
    frame["warnings"] = warnings
    frame.to_csv(out_path, index=False)


def measure(name, command, discard_output=False):
    """Run one process; its own peak resident set size comes from wait4's resource usage."""
    start = time.perf_counter()
    child = subprocess.Popen(command, stdout=subprocess.DEVNULL if discard_output else None)
    _, status, usage = os.wait4(child.pid, 0)
    seconds = time.perf_counter() - start
    code = os.waitstatus_to_exitcode(status)
    # Linux reports ru_maxrss in KiB.
    print(f"{name}\t{seconds:.3f}\t{usage.ru_maxrss / 1024:.1f}\t{code}")
    sys.exit(code)


def compare(a_path, b_path):
    import pandas as pd

    a = pd.read_csv(a_path)
    b = pd.read_csv(b_path)
    assert list(a.columns) == list(b.columns), (list(a.columns), list(b.columns))
    worst = 0.0
    for column in a.columns:
        if a[column].dtype.kind != "f":
            assert (a[column].fillna("") == b[column].fillna("")).all(), column
            continue
        x, y = a[column].to_numpy(), b[column].to_numpy()
        scale = np.maximum(np.abs(x), 1e-300)
        worst = max(worst, float(np.max(np.abs(x - y) / scale)))
    print(f"largest relative difference over all numeric cells: {worst:.2e}")
    if not worst < 1e-9:
        sys.exit(1)


def main(argv):
    command = argv[1] if len(argv) > 1 else ""
    if command == "make-model":
        make_model(argv[2])
    elif command == "make-data":
        make_data(int(argv[2]), argv[3], int(argv[4]) if len(argv) > 4 else 1)
    elif command == "pandas":
        pandas_score(argv[2], argv[3], argv[4])
    elif command == "measure":
        discard = argv[3] == "--discard-output"
        rest = argv[4:] if discard else argv[3:]
        assert rest[0] == "--", "measure NAME [--discard-output] -- CMD..."
        measure(argv[2], rest[1:], discard)
    elif command == "compare":
        compare(argv[2], argv[3])
    else:
        sys.exit(__doc__)


if __name__ == "__main__":
    main(sys.argv)
