#!/usr/bin/env python3
"""Reference fixtures for ogive's engine and link tests.

Writes, next to this script:

  engine/spector.json     models fitted by statsmodels on the Spector & Mazzeo (1980) data
                          that statsmodels ships (statsmodels.datasets.spector)
  engine/simulated.json   models fitted by statsmodels GLM on data simulated here from a
                          fixed seed (the data are input only; every check value is computed
                          by statsmodels or by the numpy code below)
  links/links.json        F, 1 - F, f and f' of the four links on a grid with |z| up to 35
  links/normal_quantile.json   scipy.stats.norm.ppf on a grid of probabilities

Sources of the check values, as recorded in each fixture:

* statsmodels: fitted coefficients and covariance, predict() for every row, and
  get_margeff(at='overall'|'mean', dummy=True) with its standard errors.
* numpy: statsmodels gives no per-observation standard errors and treats a derived column
  (a square, a product) as a variable of its own, so per-observation effects, delta-method
  standard errors, probability intervals, average effects and effects at the means are
  computed here by an independent numpy implementation of the analytic formulas, from
  statsmodels' coefficients and covariance. The script checks that implementation against
  statsmodels wherever statsmodels has the same quantity (models with no derived terms) and
  against central finite differences of its own probabilities, and refuses to write a fixture
  that disagrees.
* scipy (special.expit, stats.norm, stats.cauchy) for the links, and mpmath at 60 digits for
  cloglog and for every density derivative; scipy is itself checked against mpmath.

Run from the repository root:  python3 tests/reference/make_engine_fixtures.py
Needs statsmodels 0.15, numpy, scipy and mpmath (pip). The output is deterministic.
"""

import json
import os
import sys

import mpmath
import numpy as np
import scipy
import scipy.special as special
import scipy.stats as stats
import statsmodels
import statsmodels.api as sm
from statsmodels.genmod.families import links as glm_links

HERE = os.path.dirname(os.path.abspath(__file__))
LEVEL = 0.95
QUANTILE = float(stats.norm.ppf(0.5 + LEVEL / 2))
VERSIONS = (
    f"statsmodels {statsmodels.__version__}, numpy {np.__version__}, "
    f"scipy {scipy.__version__}, mpmath {mpmath.__version__}"
)


# ---------------------------------------------------------------------------------------------
# Links in numpy/scipy: F, f, f' written out independently of the Rust code.
# ---------------------------------------------------------------------------------------------

def link_functions(name):
    """(F, f, f') as numpy functions of z."""
    if name == "logit":
        F = special.expit

        def f(z):
            return special.expit(z) * special.expit(-z)

        def fp(z):
            # 1 - 2F = -tanh(z/2), written without the cancellation of 1 - 2F near 0.
            return -f(z) * np.tanh(z / 2)

    elif name == "probit":
        F = stats.norm.cdf
        f = stats.norm.pdf

        def fp(z):
            return -z * stats.norm.pdf(z)

    elif name == "cloglog":

        def F(z):
            return -np.expm1(-np.exp(z))

        def f(z):
            return np.exp(z - np.exp(z))

        def fp(z):
            return np.exp(z - np.exp(z)) * -np.expm1(z)

    elif name == "cauchit":
        F = stats.cauchy.cdf
        f = stats.cauchy.pdf

        def fp(z):
            return -2 * z / (np.pi * (1 + z * z) ** 2)

    else:
        raise ValueError(name)
    return F, f, fp


# ---------------------------------------------------------------------------------------------
# Terms in numpy. A term is a tuple:
#   ("intercept",)  ("cov", c)  ("pow", c, k)  ("log", c)  ("level", c, level)
#   ("prod", [factor, ...]) with each factor ("cov", c) or ("level", c, level)
# An observation set is a dict: numeric covariate -> float array, categorical -> array of str,
# or, for the at-means profile, categorical -> dict level -> training share.
# ---------------------------------------------------------------------------------------------

def indicator(data, c, level, n):
    values = data[c]
    if isinstance(values, dict):  # training shares
        return np.full(n, values[level])
    return (values == level).astype(float)


def factor_value(data, factor, n):
    if factor[0] == "cov":
        return np.asarray(data[factor[1]], dtype=float)
    return indicator(data, factor[1], factor[2], n)


def term_value(data, term, n):
    kind = term[0]
    if kind == "intercept":
        return np.ones(n)
    if kind == "cov":
        return np.asarray(data[term[1]], dtype=float)
    if kind == "pow":
        return np.asarray(data[term[1]], dtype=float) ** term[2]
    if kind == "log":
        return np.log(np.asarray(data[term[1]], dtype=float))
    if kind == "level":
        return indicator(data, term[1], term[2], n)
    if kind == "prod":
        out = np.ones(n)
        for factor in term[1]:
            out = out * factor_value(data, factor, n)
        return out
    raise ValueError(term)


def term_derivative(data, term, j, n):
    """d term / d covariate j (j numeric)."""
    kind = term[0]
    if kind in ("intercept", "level"):
        return np.zeros(n)
    x = np.asarray(data[term[1]], dtype=float) if kind in ("cov", "pow", "log") else None
    if kind == "cov":
        return np.ones(n) if term[1] == j else np.zeros(n)
    if kind == "pow":
        return term[2] * x ** (term[2] - 1) if term[1] == j else np.zeros(n)
    if kind == "log":
        return 1 / x if term[1] == j else np.zeros(n)
    if kind == "prod":
        total = np.zeros(n)
        for i, factor in enumerate(term[1]):
            if factor == ("cov", j):
                rest = np.ones(n)
                for m, other in enumerate(term[1]):
                    if m != i:
                        rest = rest * factor_value(data, other, n)
                total = total + rest
        return total
    raise ValueError(term)


def term_label(term):
    kind = term[0]
    if kind == "intercept":
        return "intercept"
    if kind == "cov":
        return term[1]
    if kind == "pow":
        return f"{term[1]}^{term[2]}"
    if kind == "log":
        return f"log({term[1]})"
    if kind == "level":
        return f"{term[1]}[{term[2]}]"
    return "*".join(term_label(f) for f in term[1])


def design(data, terms, n):
    return np.column_stack([term_value(data, t, n) for t in terms])


def with_value(data, c, value, n):
    changed = dict(data)
    changed[c] = np.full(n, value) if not isinstance(value, str) else np.array([value] * n)
    return changed


# ---------------------------------------------------------------------------------------------
# Effects in numpy: per observation, with delta-method gradients.
# ---------------------------------------------------------------------------------------------

def effect_slots(covariates):
    slots = []
    for c in covariates:
        if c["kind"] in ("continuous", "count"):
            slots.append((c["name"], None, "derivative"))
        elif c["kind"] == "binary":
            slots.append((c["name"], None, "discrete_change"))
        else:
            for level in c["levels"]:
                if level != c["reference"]:
                    slots.append((c["name"], level, "level_change"))
    return slots


def effects_and_gradients(data, n, model):
    """Per-observation effects (n,) and gradients (n, k) for every slot, plus p and its gradient."""
    F, f, fp = link_functions(model["link"])
    terms, beta = model["terms"], model["beta"]
    T = design(data, terms, n)
    z = T @ beta
    out = {"z": z, "T": T, "p": F(z), "p_grad": f(z)[:, None] * T, "slots": []}
    for covariate, level, kind in effect_slots(model["covariates"]):
        if kind == "derivative":
            D = np.column_stack([term_derivative(data, t, covariate, n) for t in terms])
            g = D @ beta
            effect = f(z) * g
            grad = fp(z)[:, None] * g[:, None] * T + f(z)[:, None] * D
        else:
            if kind == "discrete_change":
                to, frm = 1.0, 0.0
            else:
                to, frm = level, model["reference"][covariate]
            Tb = design(with_value(data, covariate, to, n), terms, n)
            Ta = design(with_value(data, covariate, frm, n), terms, n)
            zb, za = Tb @ beta, Ta @ beta
            effect = F(zb) - F(za)
            grad = f(zb)[:, None] * Tb - f(za)[:, None] * Ta
        out["slots"].append((covariate, level, kind, effect, grad))
    return out


def std_error(grad, V):
    return float(np.sqrt(grad @ V @ grad))


def effect_record(covariate, level, kind, value, se):
    return {
        "covariate": covariate,
        "level": level,
        "kind": kind,
        "effect": float(value),
        "std_error": se,
        "interval": [float(value - QUANTILE * se), float(value + QUANTILE * se)],
    }


def per_observation(data, n, model):
    F, f, _ = link_functions(model["link"])
    V = model["V"]
    res = effects_and_gradients(data, n, model)
    rows = []
    for i in range(n):
        t = res["T"][i]
        index_se = float(np.sqrt(t @ V @ t))
        z = float(res["z"][i])
        rows.append({
            "linear_index": z,
            "probability": float(res["p"][i]),
            "probability_std_error": float(f(z) * index_se),
            "probability_interval": [
                float(F(z - QUANTILE * index_se)),
                float(F(z + QUANTILE * index_se)),
            ],
            "effects": [
                effect_record(c, l, k, e[i], std_error(g[i], V))
                for (c, l, k, e, g) in res["slots"]
            ],
        })
    return rows


def averaged(data, n, model):
    """Average probability and average effects over the rows, with delta-method errors."""
    V = model["V"]
    res = effects_and_gradients(data, n, model)
    p_grad = res["p_grad"].mean(axis=0)
    p = float(res["p"].mean())
    return {
        "probability": {"value": p, "std_error": std_error(p_grad, V)},
        "effects": [
            effect_record(c, l, k, e.mean(), std_error(g.mean(axis=0), V))
            for (c, l, k, e, g) in res["slots"]
        ],
    }


def mean_profile(data, model):
    """Numeric covariates at their means, categorical ones at their training shares; the terms
    are then built from this profile (so a square term is the square of the mean)."""
    profile = {}
    for c in model["covariates"]:
        values = data[c["name"]]
        if c["kind"] == "categorical":
            profile[c["name"]] = {lv: float(np.mean(values == lv)) for lv in c["levels"]}
        else:
            profile[c["name"]] = np.array([float(np.mean(values))])
    return profile


def at_means(data, model):
    F, f, _ = link_functions(model["link"])
    V = model["V"]
    profile = mean_profile(data, model)
    res = effects_and_gradients(profile, 1, model)
    t = res["T"][0]
    index_se = float(np.sqrt(t @ V @ t))
    z = float(res["z"][0])
    return {
        "linear_index": z,
        "probability": {"value": float(res["p"][0]), "std_error": float(f(z) * index_se)},
        "effects": [
            effect_record(c, lv, k, e[0], std_error(g[0], V))
            for (c, lv, k, e, g) in res["slots"]
        ],
    }


# ---------------------------------------------------------------------------------------------
# Self-checks: the numpy gradients against central differences, and numpy against statsmodels.
# ---------------------------------------------------------------------------------------------

def check(condition, message):
    if not condition:
        sys.exit(f"refusing to write fixtures: {message}")


def check_gradients_numerically(data, n, model):
    """Every analytic gradient (probability and effects) against a central difference in beta,
    and every derivative effect against a central difference in its covariate."""
    base = effects_and_gradients(data, n, model)
    k = len(model["beta"])
    for i in range(k):
        h = 1e-6 * max(1.0, abs(model["beta"][i]))
        up, down = dict(model), dict(model)
        up["beta"] = model["beta"].copy()
        down["beta"] = model["beta"].copy()
        up["beta"][i] += h
        down["beta"][i] -= h
        r_up = effects_and_gradients(data, n, up)
        r_down = effects_and_gradients(data, n, down)
        numeric = (r_up["p"] - r_down["p"]) / (2 * h)
        check(np.allclose(numeric, base["p_grad"][:, i], rtol=1e-6, atol=1e-9),
              f"{model['name']}: probability gradient, coefficient {i}")
        for s, slot in enumerate(base["slots"]):
            numeric = (r_up["slots"][s][3] - r_down["slots"][s][3]) / (2 * h)
            check(np.allclose(numeric, slot[4][:, i], rtol=1e-6, atol=1e-9),
                  f"{model['name']}: gradient of effect {slot[:3]}, coefficient {i}")
    F, _, _ = link_functions(model["link"])
    for covariate, level, kind, effect, _ in base["slots"]:
        if kind != "derivative":
            continue
        x = np.asarray(data[covariate], dtype=float)
        h = 1e-6 * np.maximum(1.0, np.abs(x))
        T_up = design({**data, covariate: x + h}, model["terms"], n)
        T_down = design({**data, covariate: x - h}, model["terms"], n)
        numeric = (F(T_up @ model["beta"]) - F(T_down @ model["beta"])) / (2 * h)
        check(np.allclose(numeric, effect, rtol=1e-6, atol=1e-9),
              f"{model['name']}: derivative effect of {covariate}")


def margeff_block(result, terms, at, slots, source):
    """statsmodels' effects, which follow the design columns without the intercept."""
    m = result.get_margeff(at=at, dummy=True)
    check(terms[0] == ("intercept",), "get_margeff blocks need the intercept first")
    effects = []
    for covariate, level, kind in slots:
        i = terms.index(("cov", covariate)) - 1
        effects.append(effect_record(covariate, level, kind, m.margeff[i], float(m.margeff_se[i])))
    return {"source": source, "effects": effects}


def agree(a, b, rel=1e-12):
    return abs(a - b) <= rel * max(abs(a), abs(b))


# ---------------------------------------------------------------------------------------------
# The fixtures.
# ---------------------------------------------------------------------------------------------

def fit_discrete(cls, y, data, terms, names):
    X = design(data, terms, len(y))
    result = cls(y, X).fit(disp=0, method="newton", tol=1e-14, maxiter=200)
    check(result.mle_retvals["converged"], f"{cls.__name__} on {names} did not converge")
    return result


def fit_glm(link, y, data, terms):
    X = design(data, terms, len(y))
    family = sm.families.Binomial(link=link)
    result = sm.GLM(y, X, family=family).fit(tol=1e-13, maxiter=200)
    check(result.converged, f"GLM {link} did not converge")
    return result


def model_record(name, link, covariates, terms, result, data, rows, fit_text):
    beta = np.asarray(result.params, dtype=float)
    V = np.asarray(result.cov_params(), dtype=float)
    model = {
        "name": name,
        "link": link,
        "covariates": covariates,
        "terms": terms,
        "beta": beta,
        "V": V,
        "reference": {c["name"]: c.get("reference") for c in covariates},
    }
    n = len(rows)
    check_gradients_numerically(data, n, model)
    probabilities = np.asarray(result.predict(), dtype=float)
    obs = per_observation(data, n, model)
    for i in range(n):
        check(agree(obs[i]["probability"], probabilities[i], 1e-12),
              f"{name}: numpy and statsmodels probabilities differ at row {i}")
    record = {
        "name": name,
        "link": link,
        "fit": fit_text,
        "covariates": covariates,
        "terms": [term_label(t) for t in terms],
        "coefficients": [float(b) for b in beta],
        "covariance": [[float(v) for v in row] for row in V],
        "level": LEVEL,
        "quantile": QUANTILE,
        "probabilities": {
            "source": f"statsmodels {statsmodels.__version__} {fit_text}: predict() of every row",
            "values": [float(p) for p in probabilities],
        },
        "observations": {
            "source": "numpy: analytic effects, delta-method standard errors and index-scale "
                      "probability intervals from statsmodels' coefficients and covariance",
            "values": obs,
        },
        "average_effects": [],
        "effects_at_means": [],
    }
    numpy_average = averaged(data, n, model)
    numpy_means = at_means(data, model)
    has_derived = any(t[0] in ("pow", "prod", "log") for t in terms) or any(
        c["kind"] == "categorical" for c in covariates)
    slots = effect_slots(covariates)
    if hasattr(result, "get_margeff") and not has_derived:
        for at, key, block in (("overall", "average_effects", numpy_average),
                               ("mean", "effects_at_means", numpy_means)):
            sm_block = margeff_block(
                result, terms, at, slots,
                f"statsmodels {statsmodels.__version__} {fit_text}: "
                f"get_margeff(at='{at}', dummy=True)")
            for mine, theirs in zip(block["effects"], sm_block["effects"]):
                check(agree(mine["effect"], theirs["effect"], 1e-12)
                      and agree(mine["std_error"], theirs["std_error"], 1e-10),
                      f"{name}: numpy and statsmodels disagree on {key} of {mine['covariate']}")
            record[key].append(sm_block)
    numpy_source = ("numpy: analytic formulas from statsmodels' coefficients and covariance "
                    "(terms built from the mean profile)")
    record["average_effects"].append({"source": "numpy: mean of per-observation effects and "
                                                "of their gradients", **numpy_average})
    record["effects_at_means"].append({"source": numpy_source, **numpy_means})
    return record


def spector_fixture():
    frame = sm.datasets.spector.load_pandas().data
    data = {c: frame[c].to_numpy(dtype=float) for c in ("GPA", "TUCE", "PSI")}
    y = frame["GRADE"].to_numpy(dtype=float)
    rows = [{"GPA": float(g), "TUCE": float(t), "PSI": float(p)}
            for g, t, p in zip(data["GPA"], data["TUCE"], data["PSI"])]
    covariates = [
        {"name": "GPA", "kind": "continuous"},
        {"name": "TUCE", "kind": "count"},
        {"name": "PSI", "kind": "binary"},
    ]
    I, GPA, TUCE, PSI = ("intercept",), ("cov", "GPA"), ("cov", "TUCE"), ("cov", "PSI")
    specs = [
        ("spector-logit", "logit", sm.Logit, [I, GPA, TUCE, PSI]),
        ("spector-probit", "probit", sm.Probit, [I, GPA, TUCE, PSI]),
        ("spector-logit-square", "logit", sm.Logit, [I, GPA, ("pow", "GPA", 2), TUCE, PSI]),
        ("spector-probit-products", "probit", sm.Probit,
         [I, GPA, TUCE, ("prod", [GPA, TUCE]), PSI, ("prod", [GPA, PSI])]),
    ]
    models = []
    for name, link, cls, terms in specs:
        labels = [term_label(t) for t in terms]
        result = fit_discrete(cls, y, data, terms, labels)
        fit_text = f"{cls.__name__}(GRADE, [{', '.join(labels)}]).fit(method='newton')"
        models.append(model_record(name, link, covariates, terms, result, data, rows, fit_text))
    return {
        "about": "Spector & Mazzeo (1980) data as shipped by statsmodels "
                 "(statsmodels.datasets.spector): outcome GRADE, covariates GPA, TUCE, PSI",
        "generated_by": "tests/reference/make_engine_fixtures.py",
        "versions": VERSIONS,
        "rows": rows,
        "models": models,
    }


def simulated_fixture():
    rng = np.random.default_rng(20240611)
    n = 250
    amount = np.round(rng.lognormal(mean=1.0, sigma=0.5, size=n), 3)
    visits = rng.poisson(2.0, size=n).astype(float)
    flag = (rng.random(n) < 0.4).astype(float)
    group = rng.choice(np.array(["a", "b", "c"]), size=n, p=[0.5, 0.3, 0.2])
    data = {"amount": amount, "visits": visits, "flag": flag, "group": group}
    truth = (-1.2 + 0.8 * np.log(amount) + 0.15 * visits - 0.5 * flag
             + 0.4 * (group == "b") - 0.3 * (group == "c") + 0.2 * visits * (group == "c"))
    y = (rng.random(n) < -np.expm1(-np.exp(truth))).astype(float)
    rows = [{"amount": float(a), "visits": float(v), "flag": float(f), "group": str(g)}
            for a, v, f, g in zip(amount, visits, flag, group)]
    covariates = [
        {"name": "amount", "kind": "continuous"},
        {"name": "visits", "kind": "count"},
        {"name": "flag", "kind": "binary"},
        {"name": "group", "kind": "categorical", "levels": ["a", "b", "c"], "reference": "a"},
    ]
    terms = [
        ("intercept",), ("log", "amount"), ("cov", "visits"), ("pow", "visits", 2),
        ("cov", "flag"), ("level", "group", "b"), ("level", "group", "c"),
        ("prod", [("cov", "visits"), ("level", "group", "c")]),
        ("prod", [("cov", "amount"), ("cov", "flag")]),
    ]
    labels = [term_label(t) for t in terms]
    models = []
    for name, link_name, link in (("simulated-cloglog", "cloglog", glm_links.CLogLog()),
                                  ("simulated-cauchit", "cauchit", glm_links.Cauchy())):
        result = fit_glm(link, y, data, terms)
        fit_text = (f"GLM(y, [{', '.join(labels)}], Binomial({type(link).__name__}()))"
                    ".fit() (IRLS)")
        models.append(model_record(name, link_name, covariates, terms, result, data, rows,
                                   fit_text))
    return {
        "about": "data simulated by this script (numpy default_rng(20240611), n = 250) from a "
                 "cloglog model; the data are input only, every check value comes from "
                 "statsmodels or from the numpy formulas",
        "generated_by": "tests/reference/make_engine_fixtures.py",
        "versions": VERSIONS,
        "rows": rows,
        "models": models,
    }


# ---------------------------------------------------------------------------------------------
# Links.
# ---------------------------------------------------------------------------------------------

mpmath.mp.dps = 60


def mp_link(name, z):
    """(F, 1 - F, f, f') at the exact binary value z, to 60 digits."""
    z = mpmath.mpf(z)
    if name == "logit":
        F = 1 / (1 + mpmath.exp(-z))
        Q = 1 / (1 + mpmath.exp(z))
        f = F * Q
        fp = f * (Q - F)
    elif name == "probit":
        F = mpmath.ncdf(z)
        Q = mpmath.ncdf(-z)
        f = mpmath.npdf(z)
        fp = -z * f
    elif name == "cloglog":
        ez = mpmath.exp(z)
        F = -mpmath.expm1(-ez)
        Q = mpmath.exp(-ez)
        f = mpmath.exp(z - ez)
        fp = f * (1 - ez)
    else:
        F = mpmath.mpf(1) / 2 + mpmath.atan(z) / mpmath.pi
        Q = mpmath.mpf(1) / 2 - mpmath.atan(z) / mpmath.pi
        f = 1 / (mpmath.pi * (1 + z * z))
        fp = -2 * z / (mpmath.pi * (1 + z * z) ** 2)
    return [float(v) for v in (F, Q, f, fp)]


def scipy_link(name, z):
    """(F, 1 - F, f) from scipy, or None where scipy has no direct function."""
    if name == "logit":
        return [float(special.expit(z)), float(special.expit(-z)),
                float(special.expit(z) * special.expit(-z))]
    if name == "probit":
        return [float(stats.norm.cdf(z)), float(stats.norm.sf(z)), float(stats.norm.pdf(z))]
    if name == "cauchit":
        return [float(stats.cauchy.cdf(z)), float(stats.cauchy.sf(z)),
                float(stats.cauchy.pdf(z))]
    return None


def z_grid():
    small = [1e-12, 1e-8, 1e-4, 0.01, 0.1, 0.3, 0.6744897501960817, 0.7, 1.3,
             1.959963984540054, 2.7, 5.5, 8.3, 12.7, 19.1, 26.9, 33.3, 34.9]
    steps = [i / 2 for i in range(0, 71)]  # 0, 0.5, ..., 35
    # A dense grid of points that are not round numbers: an approximation that is good only at
    # its own nodes or at round values should not pass.
    dense = [0.0137 + 0.0731 * i for i in range(0, 479)]
    values = sorted(set(steps + small + dense))
    return sorted(set([-v for v in values] + values))


def relative(a, b):
    if a == b:
        return 0.0
    return abs(a - b) / max(abs(a), abs(b))


def links_fixture():
    tiny = np.finfo(float).tiny
    links = {}
    worst = {}
    for name in ("logit", "probit", "cloglog", "cauchit"):
        points = []
        for z in z_grid():
            exact = mp_link(name, z)
            sp = scipy_link(name, z)
            if sp is None:
                values = exact
                sources = ["mpmath 60 digits: -expm1(-exp(z))", "mpmath: exp(-exp(z))",
                           "mpmath: exp(z - exp(z))", "mpmath: f(z)(1 - exp(z))"]
            else:
                values = sp + [exact[3]]
                for s, e in zip(sp, exact[:3]):
                    if abs(e) >= tiny:
                        worst[name] = max(worst.get(name, 0.0), relative(s, e))
                sources = None
            points.append({"z": z, "probability": values[0], "complement": values[1],
                           "density": values[2], "density_derivative": values[3]})
        if name == "logit":
            sources = ["scipy.special.expit(z)", "scipy.special.expit(-z)",
                       "scipy.special.expit(z) * scipy.special.expit(-z)",
                       "mpmath 60 digits: f(z)(F(-z) - F(z))"]
        elif name == "probit":
            sources = ["scipy.stats.norm.cdf(z)", "scipy.stats.norm.sf(z)",
                       "scipy.stats.norm.pdf(z)", "mpmath 60 digits: -z phi(z)"]
        elif name == "cauchit":
            sources = ["scipy.stats.cauchy.cdf(z)", "scipy.stats.cauchy.sf(z)",
                       "scipy.stats.cauchy.pdf(z)",
                       "mpmath 60 digits: -2z / (pi (1 + z^2)^2)"]
        links[name] = {
            "sources": dict(zip(["probability", "complement", "density", "density_derivative"],
                                sources)),
            "points": points,
        }
    for name, w in worst.items():
        check(w < 5e-13, f"scipy and mpmath differ by {w:e} (relative) for {name}")
    return {
        "about": "link functions on a grid of z with |z| up to 35; where a value is below the "
                 "smallest normal double it is recorded as computed (0 or subnormal)",
        "generated_by": "tests/reference/make_engine_fixtures.py",
        "versions": VERSIONS,
        "scipy_vs_mpmath_worst_relative": worst,
        "links": links,
    }


def quantile_fixture():
    ps = [1e-300, 1e-200, 1e-100, 1e-50, 1e-20, 1e-10, 1e-6, 1e-3, 0.01, 0.025, 0.05, 0.1,
          0.2, 0.3, 0.4, 0.45, 0.5, 0.55, 0.6, 0.7, 0.8, 0.9, 0.95, 0.975, 0.99, 0.999,
          1 - 1e-6, 1 - 1e-10, 1 - 2 ** -52]
    points = []
    for p in ps:
        q = float(stats.norm.ppf(p))
        exact = float(mpmath.findroot(lambda x: mpmath.ncdf(x) - mpmath.mpf(p), q))
        check(relative(q, exact) < 1e-13 or abs(q - exact) < 1e-15,
              f"scipy ppf and mpmath differ at p = {p}")
        points.append({"p": p, "quantile": q})
    return {
        "about": "standard normal quantiles",
        "source": f"scipy.stats.norm.ppf (scipy {scipy.__version__}), checked against mpmath",
        "generated_by": "tests/reference/make_engine_fixtures.py",
        "points": points,
    }


def write(relative_path, value, indent=1):
    path = os.path.join(HERE, relative_path)
    os.makedirs(os.path.dirname(path), exist_ok=True)
    with open(path, "w", encoding="utf-8") as out:
        json.dump(value, out, indent=indent, allow_nan=False)
        out.write("\n")
    print(f"wrote {os.path.relpath(path)}")


def main():
    write("engine/spector.json", spector_fixture())
    # Compact: it holds every effect of every row of two models.
    write("engine/simulated.json", simulated_fixture(), indent=None)
    write("links/links.json", links_fixture(), indent=None)
    write("links/normal_quantile.json", quantile_fixture())


if __name__ == "__main__":
    main()
