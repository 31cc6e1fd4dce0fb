"""Reference values for `ogive describe` from statsmodels, on the Spector & Mazzeo (1980) data
that statsmodels ships (statsmodels.datasets.spector: 32 students, GRADE improved or not, on
GPA, TUCE score and the PSI teaching-method indicator).

Writes, beside this script:
  spector.csv   the data, columns gpa,tuce,psi,grade (lower-case names of GPA, TUCE, PSI, GRADE)
  spector.json  for logit and probit: the fitted params and their covariance (so the Rust
                tests can build an ogive model file), the coefficient table (bse, z, p-values),
                fitted probabilities, and get_margeff(at='overall', dummy=True) and
                get_margeff(at='mean', dummy=True) effects with standard errors; plus the
                training min/max/mean/std of each covariate.

Run:  python3 tests/reference/describe/make_spector_fixtures.py
The committed outputs were written by the versions recorded in spector.json under "source".
"""

import json
import pathlib

import numpy as np
import pandas as pd
import scipy
import statsmodels
import statsmodels.api as sm

HERE = pathlib.Path(__file__).resolve().parent
COVARIATES = ["gpa", "tuce", "psi"]


def main():
    raw = sm.datasets.spector.load_pandas().data
    data = pd.DataFrame(
        {
            "gpa": raw["GPA"],
            "tuce": raw["TUCE"],
            "psi": raw["PSI"].astype(int),
            "grade": raw["GRADE"].astype(int),
        }
    )
    data.to_csv(HERE / "spector.csv", index=False)

    exog = sm.add_constant(data[COVARIATES].astype(float))
    endog = data["grade"].astype(float)
    fixture = {
        "source": {
            "data": "statsmodels.datasets.spector (Spector & Mazzeo 1980), 32 observations",
            "statsmodels": statsmodels.__version__,
            "numpy": np.__version__,
            "scipy": scipy.__version__,
            "pandas": pd.__version__,
        },
        "terms": ["intercept"] + COVARIATES,
        "training": {
            name: {
                "min": float(data[name].min()),
                "max": float(data[name].max()),
                "mean": float(data[name].astype(float).mean()),
                "std_dev": float(data[name].astype(float).std(ddof=1)),
            }
            for name in COVARIATES
        },
        "observations": int(len(data)),
        "models": {},
    }
    for link, family in [("logit", sm.Logit), ("probit", sm.Probit)]:
        result = family(endog, exog).fit(method="newton", tol=1e-14, maxiter=100, disp=0)
        overall = result.get_margeff(at="overall", dummy=True)
        at_mean = result.get_margeff(at="mean", dummy=True)
        fixture["models"][link] = {
            "params": result.params.tolist(),
            "cov_params": result.cov_params().values.tolist(),
            "bse": result.bse.tolist(),
            "z": result.tvalues.tolist(),
            "p_values": result.pvalues.tolist(),
            "conf_int_95": result.conf_int(alpha=0.05).values.tolist(),
            "log_likelihood": float(result.llf),
            "null_log_likelihood": float(result.llnull),
            "iterations": int(result.mle_retvals["iterations"]),
            "fitted_probabilities": result.predict(exog).tolist(),
            "margeff_overall": {
                "call": "get_margeff(at='overall', dummy=True)",
                "effects": overall.margeff.tolist(),
                "std_errors": overall.margeff_se.tolist(),
            },
            "margeff_mean": {
                "call": "get_margeff(at='mean', dummy=True)",
                "effects": at_mean.margeff.tolist(),
                "std_errors": at_mean.margeff_se.tolist(),
            },
        }
    with open(HERE / "spector.json", "w") as out:
        json.dump(fixture, out, indent=1)
        out.write("\n")


if __name__ == "__main__":
    main()
