#!/usr/bin/env python3
"""Reference fixtures for `ogive fit` (tests/fit_reference.rs).

Writes, next to this script:

  spector.csv              the Spector & Mazzeo (1980) data as statsmodels ships it
                           (statsmodels.datasets.spector; the worked logit/probit example of
                           Greene's Econometric Analysis): GPA, TUCE, PSI, GRADE
  spector.json             statsmodels fits on it: Logit and Probit (coefficients, classical
                           and HC0 standard errors, log-likelihood, null log-likelihood), and
                           GLM binomial with the CLogLog and Cauchy links fitted with
                           method='newton' (observed information) and, for comparison only,
                           with the default IRLS (expected information)
  simulated_categorical.csv / .json
                           data simulated here (numpy, fixed seed) with a three-level text
                           covariate; statsmodels smf.logit with C(region) (treatment coding,
                           reference = first level in sorted order, as ogive's default)
  simulated_square.csv / .json
                           data simulated here with a square term; statsmodels smf.probit with
                           I(age**2)

Simulated data are input only: every check value is computed by statsmodels. Terms are named in
ogive's syntax so the test can look coefficients up by name.

Run from the repository root:  python3 tests/reference/fit/make_fit_fixtures.py
Needs statsmodels 0.15, numpy and pandas (pip). The output is deterministic.
"""

import json
import os

import numpy as np
import pandas as pd
import statsmodels
import statsmodels.api as sm
import statsmodels.formula.api as smf

HERE = os.path.dirname(os.path.abspath(__file__))


def write_json(name, payload):
    with open(os.path.join(HERE, name), "w") as out:
        json.dump(payload, out, indent=1)
        out.write("\n")


def discrete(result, robust, names):
    """Coefficients, classical and HC0 standard errors of a statsmodels discrete-model fit."""
    params = np.asarray(result.params)
    classical = np.asarray(result.bse)
    hc0 = np.asarray(robust.bse)
    return {
        "terms": names,
        "coefficients": params.tolist(),
        "std_errors": classical.tolist(),
        "hc0_std_errors": hc0.tolist(),
        "log_likelihood": float(result.llf),
        "null_log_likelihood": float(result.llnull),
        "converged": bool(result.mle_retvals["converged"]),
    }


def check_hc0_is_plain_sandwich(result, robust, exog):
    """statsmodels' HC0 for a discrete model must be H^-1 (S'S) H^-1 with no small-sample factor;
    refuse to write a fixture if that assumption is wrong."""
    scores = result.model.score_obs(result.params)
    bread = np.linalg.inv(-result.model.hessian(result.params))
    sandwich = bread @ (scores.T @ scores) @ bread
    mine = np.sqrt(np.diag(sandwich))
    assert np.allclose(mine, robust.bse, rtol=1e-10, atol=0), (mine, robust.bse)


def spector():
    data = sm.datasets.spector.load_pandas().data
    data[["GPA", "TUCE", "PSI", "GRADE"]].to_csv(
        os.path.join(HERE, "spector.csv"), index=False, float_format="%.17g"
    )
    exog = sm.add_constant(data[["GPA", "TUCE", "PSI"]], prepend=True)
    endog = data["GRADE"]
    names = ["intercept", "GPA", "TUCE", "PSI"]
    out = {
        "source": "statsmodels %s, statsmodels.datasets.spector (Spector & Mazzeo 1980)"
        % statsmodels.__version__,
        "outcome": "GRADE",
        "terms": "GPA, TUCE, PSI",
    }
    for label, model_class in [("logit", sm.Logit), ("probit", sm.Probit)]:
        model = model_class(endog, exog)
        result = model.fit(method="newton", tol=1e-12, maxiter=100, disp=0)
        robust = model.fit(method="newton", tol=1e-12, maxiter=100, disp=0, cov_type="HC0")
        check_hc0_is_plain_sandwich(result, robust, exog)
        out[label] = discrete(result, robust, names)
    for label, link in [("cloglog", sm.families.links.CLogLog()), ("cauchit", sm.families.links.Cauchy())]:
        family = sm.families.Binomial(link=link)
        newton = sm.GLM(endog, exog, family=family).fit(method="newton", tol=1e-12, maxiter=200)
        irls = sm.GLM(endog, exog, family=family).fit(tol=1e-12, maxiter=200)
        out[label] = {
            "terms": names,
            "coefficients": np.asarray(newton.params).tolist(),
            "std_errors": np.asarray(newton.bse).tolist(),
            "log_likelihood": float(newton.llf),
            "irls_std_errors": np.asarray(irls.bse).tolist(),
            "method": "GLM(Binomial(link), method='newton'): observed information",
        }
    write_json("spector.json", out)


def simulated_categorical():
    rng = np.random.default_rng(20240611)
    n = 1500
    income = rng.gamma(4.0, 0.5, n)
    tenure = rng.normal(0.0, 1.0, n)
    region = rng.choice(["north", "east", "south"], n, p=[0.3, 0.45, 0.25])
    effect = {"east": 0.0, "north": 0.6, "south": -0.5}
    z = -0.8 + 0.45 * income - 0.7 * tenure + np.array([effect[r] for r in region])
    y = (rng.uniform(size=n) < 1.0 / (1.0 + np.exp(-z))).astype(int)
    frame = pd.DataFrame({"outcome": y, "income": income, "tenure": tenure, "region": region})
    frame.to_csv(os.path.join(HERE, "simulated_categorical.csv"), index=False, float_format="%.17g")
    model = smf.logit("outcome ~ income + tenure + C(region)", data=frame)
    result = model.fit(method="newton", tol=1e-12, maxiter=100, disp=0)
    robust = model.fit(method="newton", tol=1e-12, maxiter=100, disp=0, cov_type="HC0")
    rename = {
        "Intercept": "intercept",
        "income": "income",
        "tenure": "tenure",
        "C(region)[T.north]": "region=north",
        "C(region)[T.south]": "region=south",
    }
    names = [rename[p] for p in result.params.index]
    out = {
        "source": "statsmodels %s smf.logit('outcome ~ income + tenure + C(region)'), treatment coding with reference 'east'"
        % statsmodels.__version__,
        "outcome": "outcome",
        "terms": "income, tenure, region",
        "categorical": "region",
        "logit": discrete(result, robust, names),
    }
    write_json("simulated_categorical.json", out)


def simulated_square():
    rng = np.random.default_rng(977)
    n = 2000
    age = rng.uniform(20.0, 70.0, n)
    owner = (rng.uniform(size=n) < 0.4).astype(int)
    z = -4.0 + 0.16 * age - 0.0017 * age**2 + 0.5 * owner
    from scipy.stats import norm

    y = (rng.uniform(size=n) < norm.cdf(z)).astype(int)
    frame = pd.DataFrame({"taken": y, "age": age, "owner": owner})
    frame.to_csv(os.path.join(HERE, "simulated_square.csv"), index=False, float_format="%.17g")
    model = smf.probit("taken ~ age + I(age**2) + owner", data=frame)
    result = model.fit(method="newton", tol=1e-12, maxiter=100, disp=0)
    robust = model.fit(method="newton", tol=1e-12, maxiter=100, disp=0, cov_type="HC0")
    rename = {"Intercept": "intercept", "age": "age", "I(age ** 2)": "age^2", "owner": "owner"}
    names = [rename[p] for p in result.params.index]
    out = {
        "source": "statsmodels %s smf.probit('taken ~ age + I(age**2) + owner')"
        % statsmodels.__version__,
        "outcome": "taken",
        "terms": "age, age^2, owner",
        "probit": discrete(result, robust, names),
    }
    write_json("simulated_square.json", out)


if __name__ == "__main__":
    spector()
    simulated_categorical()
    simulated_square()
