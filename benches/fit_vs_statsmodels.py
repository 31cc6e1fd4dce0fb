#!/usr/bin/env python3
"""Helper of benches/fit_vs_statsmodels.sh.

  generate CSV ROWS        write a CSV of ROWS observations: outcome y and 10 covariates
                           (x1..x7 continuous, b1..b3 binary), drawn with numpy from a fixed seed
  statsmodels CSV LINK OUT the baseline pipeline: pandas.read_csv, then statsmodels
                           Logit(...).fit() or Probit(...).fit() with their defaults; writes the
                           coefficients to OUT as JSON
  measure OUT -- CMD...    run CMD as a child process; write its wall time (s), its CPU time (user
                           + system, s) and its peak resident memory (KiB), from getrusage of the
                           child, to OUT as JSON
  compare MODEL OUT        largest relative difference between the coefficients of an ogive model
                           file and those written by `statsmodels`
"""

import json
import resource
import subprocess
import sys
import time

COVARIATES = ["x1", "x2", "x3", "x4", "x5", "x6", "x7", "b1", "b2", "b3"]
TRUTH = [-0.6, 0.5, -0.4, 0.3, -0.2, 0.15, 0.1, -0.05, 0.4, -0.3, 0.25]


def generate(path, rows):
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(5150)
    frame = {}
    for name in COVARIATES[:7]:
        frame[name] = rng.normal(0.0, 1.0, rows)
    for name in COVARIATES[7:]:
        frame[name] = (rng.uniform(size=rows) < 0.4).astype(np.int64)
    design = np.column_stack([np.ones(rows)] + [frame[n] for n in COVARIATES])
    z = design @ np.array(TRUTH)
    y = (rng.uniform(size=rows) < 1.0 / (1.0 + np.exp(-z))).astype(np.int64)
    out = pd.DataFrame({"y": y, **frame})
    out.to_csv(path, index=False, float_format="%.9g")


def baseline(path, link, out):
    import pandas as pd
    import statsmodels.api as sm

    data = pd.read_csv(path)
    exog = sm.add_constant(data[COVARIATES], prepend=True)
    model = (sm.Logit if link == "logit" else sm.Probit)(data["y"], exog)
    result = model.fit(disp=0)
    with open(out, "w") as f:
        json.dump({"coefficients": [float(b) for b in result.params]}, f)


def measure(out, command):
    start = time.perf_counter()
    completed = subprocess.run(command, stdout=subprocess.DEVNULL)
    seconds = time.perf_counter() - start
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    with open(out, "w") as f:
        json.dump(
            {
                "seconds": seconds,
                "cpu_seconds": usage.ru_utime + usage.ru_stime,
                "peak_kib": usage.ru_maxrss,
                "status": completed.returncode,
            },
            f,
        )
    sys.exit(completed.returncode)


def compare(model_path, reference_path):
    with open(model_path) as f:
        model = json.load(f)
    with open(reference_path) as f:
        reference = json.load(f)["coefficients"]
    ours = {t["term"]: t["coefficient"] for t in model["terms"]}
    names = ["intercept"] + COVARIATES
    worst = max(
        abs(ours[n] - b) / max(abs(ours[n]), abs(b)) for n, b in zip(names, reference)
    )
    print("%.3e" % worst)


if __name__ == "__main__":
    mode = sys.argv[1]
    if mode == "generate":
        generate(sys.argv[2], int(sys.argv[3]))
    elif mode == "statsmodels":
        baseline(sys.argv[2], sys.argv[3], sys.argv[4])
    elif mode == "measure":
        measure(sys.argv[2], sys.argv[4:])
    elif mode == "compare":
        compare(sys.argv[2], sys.argv[3])
    else:
        sys.exit("unknown mode " + mode)
