#!/usr/bin/env python3
"""Reference fixtures for weighted `ogive fit` (tests/fit_weights.rs).

Writes, next to this script:

  weighted.csv    data simulated here (numpy, fixed seed): outcome y, covariates x and z, a
                  column of whole frequency weights `copies` (1 to 4) and a column of sampling
                  weights `inverse_p` (inverse selection probabilities between 1 and 8), and
                  `some_zero`: `copies` with every fifth row (0-based index divisible by 5)
                  given weight 0
  weighted.json   statsmodels GLM(Binomial) fits on it, for the logit and probit links:
                    frequency   GLM(freq_weights=copies): coefficients and the classical
                                covariance, the inverse of the observed information
                                (-model.hessian(params, observed=True))⁻¹
                    sampling    GLM(var_weights=inverse_p, cov_type='HC0'): coefficients and
                                the HC0 sandwich H⁻¹ (Σ sᵢ sᵢᵀ) H⁻¹ with H the observed
                                information and sᵢ = model.score_obs(params)[i], the weighted
                                score of row i; for logit also res.cov_params() itself,
                                which statsmodels computes the same way (checked here)
                  and the weighted log-likelihood and null log-likelihood (res.llf, res.llnull);
                  for the frequency fits also res.aic, res.bic (statsmodels 0.15: bic_llf, with
                  log of the weight sum), res.nobs (rows) and model.wnobs (the sum of the
                  weights);
                    some_zero   GLM(freq_weights=some_zero), the same figures: rows of weight 0
                                contribute nothing. The covariance is the inverse observed
                                information of the fit on the rows of positive weight
                                (statsmodels' observed Hessian divides by each weight, so a zero
                                gives NaN); the script checks that fit has the same coefficients
                                and log-likelihood as the one with the zeros.

Simulated data are input only: every check value is computed by statsmodels. Terms are named in
ogive's syntax (intercept, x, z).

Run from the repository root:  python3 tests/reference/weights/make_weight_fixtures.py
Needs statsmodels 0.15, numpy and pandas (pip). The output is deterministic.
"""

import json
import os

import numpy as np
import pandas as pd
import statsmodels.api as sm

HERE = os.path.dirname(os.path.abspath(__file__))
TERMS = ["intercept", "x", "z"]


def simulate():
    rng = np.random.default_rng(20240611)
    n = 1500
    x = rng.normal(0.0, 1.0, n)
    z = rng.uniform(-1.5, 1.5, n)
    eta = -0.4 + 0.9 * x - 0.6 * z
    y = (rng.uniform(size=n) < 1.0 / (1.0 + np.exp(-eta))).astype(int)
    copies = rng.integers(1, 5, n)
    inverse_p = np.round(rng.uniform(1.0, 8.0, n), 3)
    some_zero = np.where(np.arange(n) % 5 == 0, 0, copies)
    return pd.DataFrame({"y": y, "x": np.round(x, 6), "z": np.round(z, 6),
                         "copies": copies, "inverse_p": inverse_p, "some_zero": some_zero})


def family(link):
    links = {"logit": sm.families.links.Logit(), "probit": sm.families.links.Probit()}
    return sm.families.Binomial(link=links[link])


def fit(frame, link, **weights):
    x = sm.add_constant(frame[["x", "z"]].to_numpy())
    model = sm.GLM(frame["y"].to_numpy(), x, family=family(link), **weights)
    return model, x


def frequency(frame, link, column="copies"):
    model, _ = fit(frame, link, freq_weights=frame[column].to_numpy())
    res = model.fit(tol=1e-13, maxiter=200)
    positive = frame[frame[column] > 0]
    kept, _ = fit(positive, link, freq_weights=positive[column].to_numpy())
    kept_res = kept.fit(tol=1e-13, maxiter=200)
    assert np.allclose(kept_res.params, res.params, rtol=1e-10, atol=0)
    assert np.isclose(kept_res.llf, res.llf, rtol=1e-12, atol=0)
    information = -kept.hessian(res.params, observed=True)
    covariance = np.linalg.inv(information)
    if link == "logit":
        # Canonical link: observed and expected information coincide (cov_params is taken at
        # the IRLS weights of the last iteration, hence agreement to 1e-7 rather than 1e-12).
        assert np.allclose(covariance, res.cov_params(), rtol=1e-7, atol=0)
    return {
        "coefficients": res.params.tolist(),
        "covariance": covariance.tolist(),
        "log_likelihood": float(res.llf),
        "null_log_likelihood": float(res.llnull),
        "aic": float(res.aic),
        "bic": float(res.bic),
        "nobs": int(res.nobs),
        "weighted_nobs": float(model.wnobs),
    }


def sampling(frame, link):
    model, _ = fit(frame, link, var_weights=frame["inverse_p"].to_numpy())
    res = model.fit(tol=1e-13, maxiter=200, cov_type="HC0")
    information = -model.hessian(res.params, observed=True)
    bread = np.linalg.inv(information)
    scores = model.score_obs(res.params)
    covariance = bread @ (scores.T @ scores) @ bread
    out = {
        "coefficients": res.params.tolist(),
        "covariance": covariance.tolist(),
        "log_likelihood": float(res.llf),
        "null_log_likelihood": float(res.llnull),
    }
    if link == "logit":
        assert np.allclose(covariance, res.cov_params(), rtol=1e-9, atol=0)
        out["statsmodels_hc0_cov_params"] = np.asarray(res.cov_params()).tolist()
    return out


def main():
    frame = simulate()
    frame.to_csv(os.path.join(HERE, "weighted.csv"), index=False)
    # Read back what was written, so the fits see exactly the file's numbers.
    frame = pd.read_csv(os.path.join(HERE, "weighted.csv"))
    fixture = {
        "source": "statsmodels " + sm.__version__ + " GLM(Binomial), tol=1e-13",
        "terms": TERMS,
        "rows": int(len(frame)),
    }
    for link in ["logit", "probit"]:
        fixture[link] = {
            "frequency": frequency(frame, link),
            "sampling": sampling(frame, link),
            "some_zero": frequency(frame, link, "some_zero"),
        }
    with open(os.path.join(HERE, "weighted.json"), "w") as out:
        json.dump(fixture, out, indent=1)
        out.write("\n")


if __name__ == "__main__":
    main()
