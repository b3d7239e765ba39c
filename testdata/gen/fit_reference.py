#!/usr/bin/python3
"""Reference values for heft's Fit orchestration (package fit, fit.go).

Makes one seeded table of raw columns (invented data, input only) and
writes it as testdata/fixtures/fit/sample.csv. Then, for each case, it
encodes the table independently of heft's Go code by the documented rules
(reference level = most frequent, ties lexical; levels with fewer than
min_level rows pooled into "(other)"; kept levels by descending frequency
then lexically; with the indicator policy a "name=(missing)" term for each
column that has missing values and the mean of the observed values imputed)
and fits it with statsmodels: Logit (Newton) for the propensity, OLS or
Logit per arm for the outcome. Diagnostics come from numpy and scipy:
numpy.quantile (method "linear", Hyndman & Fan type 7),
scipy.stats.mannwhitneyu for the AUC, numpy.histogram for the propensity
histogram, numpy.std(ddof=1) for the SDs. Results go to
testdata/ref/fit/<case>.json.

Run from anywhere with Debian's interpreter:

    /usr/bin/python3 testdata/gen/fit_reference.py
"""

import csv
import json
import os
import platform

import numpy as np
import scipy
import scipy.stats
import statsmodels
import statsmodels.api as sm

COMMAND = "/usr/bin/python3 testdata/gen/fit_reference.py"
ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..")
FIX = os.path.join(ROOT, "testdata", "fixtures", "fit")
REF = os.path.join(ROOT, "testdata", "ref", "fit")
VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "statsmodels": statsmodels.__version__,
}
QS = [0, 0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99, 1]


def expit(v):
    return 1.0 / (1.0 + np.exp(-v))


def make_table(n=1000, seed=20261201):
    rng = np.random.default_rng(seed)
    age = np.round(rng.normal(50, 10, n)).astype(int)
    income = np.round(rng.lognormal(3, 0.4, n), 3)
    regions = ["north", "south", "east", "west", "isle", "moon"]
    region = rng.choice(regions, size=n, p=[0.4, 0.3, 0.19, 0.07, 0.03, 0.01])
    member = rng.random(n) < 0.35
    eta = -2 + 0.04 * age - 0.02 * income + 0.5 * (region == "south") - 0.4 * (region == "east") + 0.6 * member
    t = (rng.random(n) < expit(eta)).astype(int)
    y = 1 + 2 * t + 0.05 * age + 0.03 * income - 0.5 * (region == "west") + rng.normal(0, 1, n)
    ybin = (rng.random(n) < expit(-1 + 0.8 * t + 0.02 * (age - 50) + 0.4 * member)).astype(int)
    # Missing values for the indicator case: income null in ~8% of rows,
    # region null in a few, the binary outcome null in a few.
    inc_miss = rng.random(n) < 0.08
    reg_miss = rng.random(n) < 0.05
    y_miss = rng.random(n) < 0.05
    return dict(age=age, income=income, region=region, member=member, t=t, y=y, ybin=ybin,
                inc_miss=inc_miss, reg_miss=reg_miss, y_miss=y_miss)


def write_csv(tab):
    os.makedirs(FIX, exist_ok=True)
    n = len(tab["t"])
    with open(os.path.join(FIX, "sample.csv"), "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["t", "age", "income", "region", "member", "y", "ybin", "income_m", "region_m", "ybin_m"])
        for i in range(n):
            w.writerow([
                tab["t"][i], tab["age"][i], repr(float(tab["income"][i])), tab["region"][i],
                "true" if tab["member"][i] else "false", repr(float(tab["y"][i])), tab["ybin"][i],
                "" if tab["inc_miss"][i] else repr(float(tab["income"][i])),
                "" if tab["reg_miss"][i] else tab["region"][i],
                "" if tab["y_miss"][i] else tab["ybin"][i],
            ])


def numeric(name, x, missing, policy):
    """Terms of a numeric column: the value (imputed) and maybe an indicator."""
    if not missing.any():
        return {name: x.astype(float)}, {"impute": 0.0}
    assert policy == "indicator"
    mean = float(x[~missing].mean())
    return {name: np.where(missing, mean, x), name + "=(missing)": missing.astype(float)}, {"impute": mean}


def categorical(name, values, missing, policy, min_level):
    obs = [v for v, m in zip(values, missing) if not m]
    counts = {}
    for v in obs:
        counts[v] = counts.get(v, 0) + 1
    order = sorted(counts, key=lambda v: (-counts[v], v))
    ref = order[0]
    kept = [v for v in order[1:] if counts[v] >= min_level]
    pooled = sorted(v for v in order[1:] if counts[v] < min_level)
    cols = {}
    for lev in kept:
        cols[f"{name}={lev}"] = np.array([(not m) and v == lev for v, m in zip(values, missing)], dtype=float)
    if pooled:
        cols[f"{name}=(other)"] = np.array([(not m) and v in pooled for v, m in zip(values, missing)], dtype=float)
    if missing.any():
        assert policy == "indicator"
        cols[f"{name}=(missing)"] = missing.astype(float)
    return cols, {"reference": ref, "levels": kept, "pooled": pooled}


def glm_json(res, terms, family):
    out = {"terms": terms, "coef": list(map(float, res.params)), "se": list(map(float, res.bse)),
           "n": int(res.nobs), "family": family}
    if family == "binomial":
        out["loglik"] = float(res.llf)
    else:
        out["scale"] = float(res.scale)
    return out


def quantiles(x):
    return [float(v) for v in np.quantile(x, QS)] if len(x) else []


def deciles(x):
    out = []
    for v in np.quantile(x, [k / 10 for k in range(1, 10)]):
        if not out or v > out[-1]:
            out.append(float(v))
    return out


def run_case(name, tab, covs, outcome, policy, min_level):
    n = len(tab["t"])
    t = tab["t"]
    cols, specs = {}, []
    for cname, src, kind, miss in covs:
        x = tab[src]
        m = tab[miss] if miss else np.zeros(n, dtype=bool)
        if kind == "numeric":
            c, s = numeric(cname, x, m, policy)
        else:
            vals = ["true" if v is True or v is np.True_ else "false" if v is False or v is np.False_ else str(v) for v in x]
            c, s = categorical(cname, vals, m, policy, min_level)
        cols.update(c)
        specs.append(dict(name=cname, kind=kind, missing_indicator=bool(m.any()), **s))
    terms = ["intercept"] + list(cols)
    X = np.column_stack([np.ones(n)] + [cols[k] for k in cols])
    prop = sm.Logit(t, X).fit(method="newton", tol=1e-14, maxiter=200, disp=0)
    e = prop.predict(X)
    out = {"case": name, "command": COMMAND, "versions": VERSIONS, "missing": policy, "min_level": min_level,
           "columns": specs, "propensity": glm_json(prop, terms, "binomial")}
    ycol, ysrc, ymiss, kind = outcome
    y = tab[ysrc].astype(float)
    ym = tab[ymiss] if ymiss else np.zeros(n, dtype=bool)
    models = {}
    for arm, label in [(1, "treated"), (0, "control")]:
        rows = (t == arm) & ~ym
        if kind == "continuous":
            res = sm.OLS(y[rows], X[rows]).fit()
            models[label] = glm_json(res, terms, "gaussian")
        else:
            res = sm.Logit(y[rows], X[rows]).fit(method="newton", tol=1e-14, maxiter=200, disp=0)
            models[label] = glm_json(res, terms, "binomial")
    out["outcome"] = {"column": ycol, "kind": kind, **models}
    e1, e0 = e[t == 1], e[t == 0]
    u = scipy.stats.mannwhitneyu(e1, e0, alternative="two-sided").statistic
    out["diagnostics"] = {
        "n_treated": int((t == 1).sum()), "n_control": int((t == 0).sum()),
        "auc": float(u / (len(e1) * len(e0))),
        "quantiles_treated": quantiles(e1), "quantiles_control": quantiles(e0),
        "share_below_0_01": float((e < 0.01).mean()), "share_above_0_99": float((e > 0.99).mean()),
        "missing_counts": {c: int(tab[m].sum()) for c, m in [(c[0], c[3]) for c in covs] + [(ycol, ymiss)] if m},
    }
    refs = []
    for j, term in enumerate(terms[1:], start=1):
        x = X[:, j]
        refs.append({"term": term, "edges": deciles(x),
                     "mean": float(x.mean()), "sd": float(x.std(ddof=1)),
                     "mean_treated": float(x[t == 1].mean()), "sd_treated": float(x[t == 1].std(ddof=1)),
                     "mean_control": float(x[t == 0].mean()), "sd_control": float(x[t == 0].std(ddof=1))})
    dec = deciles(e)
    out["reference"] = {
        "share_treated": float(t.mean()), "terms": refs,
        "propensity_counts": [float(c) for c in np.histogram(e, bins=np.linspace(0, 1, 51))[0]],
        "propensity_deciles": dec,
        # bin = number of deciles strictly below e: (-inf, d1], (d1, d2], ...
        "decile_counts": [float(c) for c in np.bincount(np.searchsorted(dec, e, side="left"), minlength=len(dec) + 1)],
        "propensity": [float(v) for v in e],
    }
    os.makedirs(REF, exist_ok=True)
    with open(os.path.join(REF, name + ".json"), "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")


def main():
    tab = make_table()
    write_csv(tab)
    run_case("basic", tab,
             [("age", "age", "numeric", None), ("income", "income", "numeric", None),
              ("region", "region", "categorical", None), ("member", "member", "categorical", None)],
             ("y", "y", None, "continuous"), "error", 10)
    run_case("indicator", tab,
             [("age", "age", "numeric", None), ("income_m", "income", "numeric", "inc_miss"),
              ("region_m", "region", "categorical", "reg_miss"), ("member", "member", "categorical", None)],
             ("ybin_m", "ybin", "y_miss", "binary"), "indicator", 10)


if __name__ == "__main__":
    main()
