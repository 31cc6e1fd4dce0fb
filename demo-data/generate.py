#!/usr/bin/env python3
"""Generate ogive's two invented demo datasets from stated true coefficients.

Python standard library only (random.Random with a fixed seed, math), so it runs anywhere and
writes the same bytes every time:

  demo-data/lease-arrears.csv      20,000 small-business equipment leases of a fictional lessor;
                                   arrears_60d = 1 when the lease fell 60+ days behind within a
                                   year (logit model)
  demo-data/rebate-uptake.csv      20,000 households offered an energy-efficiency rebate by a
                                   fictional energy office; took_rebate = 1 when they took it up
                                   (probit model)
  demo-data/lease-arrears-case-control.csv
                                   an outcome-stratified sample of a second invented population
                                   of 40,000 leases drawn like the first: every lease that fell
                                   behind and as many that did not, for
                                   `ogive fit --population-rate`
  demo-data/true-coefficients.json the true coefficients below, by term, in ogive's term syntax
                                   (tests/fit_demo.rs checks the committed demo models against it),
                                   and the case-control population's rate of arrears

Everything here is invented. Covariates are drawn first and rounded to the precision written to
the CSV; the linear index is computed from the rounded values, so the stated model holds exactly
for the data as written.

Run from the repository root:  python3 demo-data/generate.py
"""

import json
import math
import os
import random

HERE = os.path.dirname(os.path.abspath(__file__))
ROWS = 20_000

# lease-arrears, logit link. Reference sector: construction (the first in sorted order).
LEASE_TRUTH = {
    "intercept": 1.2,
    "log(annual_revenue)": -0.45,  # annual revenue, thousand EUR
    "years_trading": -0.09,  # years since the business was founded
    "years_trading^2": 0.0012,
    "prior_arrears": 0.42,  # earlier leases that fell 30+ days behind (count)
    "guarantor": -0.55,  # a personal guarantee was given (0/1)
    "years_trading*guarantor": 0.025,
    "sector=hospitality": 0.35,
    "sector=logistics": 0.15,
    "sector=manufacturing": -0.2,
    "sector=retail": 0.25,
}
LEASE_SECTORS = [
    ("construction", 0.22),
    ("hospitality", 0.18),
    ("logistics", 0.2),
    ("manufacturing", 0.17),
    ("retail", 0.23),
]

# rebate-uptake, probit link. Reference heating: gas (named with --categorical heating=gas).
REBATE_TRUTH = {
    "intercept": -1.1,
    "household_income": 0.006,  # thousand EUR a year
    "dwelling_age": 0.004,  # years since the dwelling was built
    "occupants": 0.08,  # people living in the household (count, at least 1)
    "owner_occupied": 0.45,  # the household owns the dwelling (0/1)
    "energy_audit": 0.6,  # the household had a free energy audit (0/1)
    "heating=district": -0.3,
    "heating=electric": 0.2,
    "heating=oil": 0.35,
}
REBATE_HEATING = [("district", 0.15), ("electric", 0.25), ("gas", 0.45), ("oil", 0.15)]


def choose(rng, weighted):
    u = rng.random()
    total = 0.0
    for value, weight in weighted:
        total += weight
        if u < total:
            return value
    return weighted[-1][0]


def poisson(rng, mean):
    """Knuth's multiplication method; fine for small means."""
    limit = math.exp(-mean)
    k, product = 0, rng.random()
    while product > limit:
        k += 1
        product *= rng.random()
    return k


def logistic(z):
    return 1.0 / (1.0 + math.exp(-z)) if z >= 0 else math.exp(z) / (1.0 + math.exp(z))


def normal_cdf(z):
    return 0.5 * math.erfc(-z / math.sqrt(2.0))


def lease_arrears(rng, count=ROWS):
    b = LEASE_TRUTH
    rows = []
    for _ in range(count):
        revenue = round(math.exp(rng.gauss(math.log(450.0), 0.8)), 1)
        revenue = max(revenue, 20.0)
        years = round(min(0.3 + rng.expovariate(1.0 / 9.0), 60.0), 1)
        arrears = min(poisson(rng, 0.6), 12)
        guarantor = 1 if rng.random() < 0.35 else 0
        sector = choose(rng, LEASE_SECTORS)
        z = (
            b["intercept"]
            + b["log(annual_revenue)"] * math.log(revenue)
            + b["years_trading"] * years
            + b["years_trading^2"] * years * years
            + b["prior_arrears"] * arrears
            + b["guarantor"] * guarantor
            + b["years_trading*guarantor"] * years * guarantor
            + b.get("sector=%s" % sector, 0.0)
        )
        y = 1 if rng.random() < logistic(z) else 0
        rows.append((y, revenue, years, arrears, guarantor, sector))
    header = "arrears_60d,annual_revenue,years_trading,prior_arrears,guarantor,sector"
    return header, rows


def rebate_uptake(rng):
    b = REBATE_TRUTH
    rows = []
    for _ in range(ROWS):
        income = round(min(max(rng.gauss(48.0, 18.0), 8.0), 180.0), 1)
        age = round(min(rng.expovariate(1.0 / 35.0), 130.0), 0)
        occupants = 1 + min(poisson(rng, 1.4), 7)
        owner = 1 if rng.random() < 0.6 else 0
        audit = 1 if rng.random() < 0.25 else 0
        heating = choose(rng, REBATE_HEATING)
        z = (
            b["intercept"]
            + b["household_income"] * income
            + b["dwelling_age"] * age
            + b["occupants"] * occupants
            + b["owner_occupied"] * owner
            + b["energy_audit"] * audit
            + b.get("heating=%s" % heating, 0.0)
        )
        y = 1 if rng.random() < normal_cdf(z) else 0
        rows.append((y, income, int(age), occupants, owner, audit, heating))
    header = "took_rebate,household_income,dwelling_age,occupants,owner_occupied,energy_audit,heating"
    return header, rows


def case_control(rng):
    """Every case of a population of 40,000 leases and an equal simple random sample of the
    non-cases, in random order; and the population's share of cases."""
    header, population = lease_arrears(rng, 40_000)
    cases = [r for r in population if r[0] == 1]
    others = [r for r in population if r[0] == 0]
    rng.shuffle(others)
    sample = cases + others[: len(cases)]
    rng.shuffle(sample)
    return header, sample, len(cases) / len(population)


def write_csv(name, header, rows):
    with open(os.path.join(HERE, name), "w", newline="") as out:
        out.write(header + "\n")
        for row in rows:
            out.write(",".join(str(v) for v in row) + "\n")


def main():
    write_csv("lease-arrears.csv", *lease_arrears(random.Random(20260101)))
    write_csv("rebate-uptake.csv", *rebate_uptake(random.Random(20260102)))
    header, sample, rate = case_control(random.Random(20260103))
    write_csv("lease-arrears-case-control.csv", header, sample)
    truth = {
        "lease-arrears": {"link": "logit", "coefficients": LEASE_TRUTH},
        "rebate-uptake": {"link": "probit", "coefficients": REBATE_TRUTH},
        "lease-arrears-case-control": {
            "link": "logit",
            "coefficients": LEASE_TRUTH,
            "population_rows": 40_000,
            "population_rate": rate,
        },
    }
    with open(os.path.join(HERE, "true-coefficients.json"), "w") as out:
        json.dump(truth, out, indent=1)
        out.write("\n")


if __name__ == "__main__":
    main()
