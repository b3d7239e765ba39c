#!/usr/bin/python3
"""Reference values for aggregate/ (balance, overlap, drift, segments).

Regenerate (from the repository root, Debian's python3-numpy and
python3-statsmodels):

    /usr/bin/python3 testdata/gen/aggregate_reference.py

Writes testdata/fixtures/aggregate/rows.csv (scored rows as the Go test feeds
them to a State: five terms, region, t, y, e, mu0, mu1; empty t or y is
null), testdata/fixtures/aggregate/reference.json (the fit sample's summary
that a model file carries: term decile edges, means and SDs, propensity
edges, deciles and decile counts) and testdata/ref/aggregate/balance.json
(per estimand: counts, weight sums, Kish ESS, per-term moments, SMD,
variance ratio, weighted KS, propensity histograms, the largest weights,
PSI, mean shifts, and per region the same counts, ESS and max |SMD|).

The data are invented (seeded draws); only the computations are checked.
Weighted moments come from statsmodels' DescrStatsW (ddof=0: divisor sum w);
unweighted variances from numpy with ddof=1. The KS distance is evaluated at
the term's edges with F(x) = sum of w over rows with value <= x, divided by
sum of w. Deciles bins put e <= d[0] in bin 0 and d[k-1] < e <= d[k] in bin k
(numpy.searchsorted, side="left"); propensity histograms use
numpy.histogram's bins (half-open, last closed).
"""

import csv
import json
import os

import numpy as np
from statsmodels.stats.weightstats import DescrStatsW

ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")
FIX = os.path.join(ROOT, "fixtures", "aggregate")
REF = os.path.join(ROOT, "ref", "aggregate")
SEED = 20261202
N_FIT = 3000
N_RUN = 5000
TERMS = ["x1", "x2", "x3", "cat=b", "cat=c"]
REGIONS = ["north", "south", "east"]
PSI_FLOOR = 1e-6  # common practice, no source (as in aggregate/drift.go)


def expit(x):
    return 1.0 / (1.0 + np.exp(-x))


def weight(estimand, t, e):
    if estimand == "ate":
        return np.where(t == 1, 1 / e, 1 / (1 - e))
    if estimand == "att":
        return np.where(t == 1, 1.0, e / (1 - e))
    if estimand == "atc":
        return np.where(t == 1, (1 - e) / e, 1.0)
    if estimand == "overlap":
        return np.where(t == 1, 1 - e, e)
    raise ValueError(estimand)


def draw(rng, n, shift):
    """Covariates (n x 5 terms) and propensities; shift moves the run."""
    x1 = rng.normal(shift, 1.0, n)
    x2 = rng.lognormal(0.0, 0.5, n)
    x3 = (rng.random(n) < 0.4 + shift / 4).astype(float)
    cat = rng.choice(3, size=n, p=[0.5, 0.3, 0.2])
    X = np.column_stack([x1, x2, x3, cat == 1, cat == 2]).astype(float)
    lp = -0.3 + 1.6 * x1 - 0.4 * np.log(x2) + 0.6 * x3 + 0.5 * X[:, 3] - 0.5 * X[:, 4]
    return X, expit(lp)


def make_fixture():
    rng = np.random.default_rng(SEED)
    Xf, ef = draw(rng, N_FIT, 0.0)
    tf = (rng.random(N_FIT) < ef).astype(int)
    qs = np.arange(1, 10) / 10
    terms = []
    for j, name in enumerate(TERMS):
        x = Xf[:, j]
        terms.append({
            "term": name,
            "edges": [float(v) for v in np.unique(np.quantile(x, qs))],
            "mean": float(x.mean()), "sd": float(x.std(ddof=1)),
            "mean_treated": float(x[tf == 1].mean()), "sd_treated": float(x[tf == 1].std(ddof=1)),
            "mean_control": float(x[tf == 0].mean()), "sd_control": float(x[tf == 0].std(ddof=1)),
        })
    deciles = np.unique(np.quantile(ef, qs))
    dcounts = np.bincount(np.searchsorted(deciles, ef, side="left"), minlength=len(deciles) + 1)
    edges = np.linspace(0.0, 1.0, 51)
    pcounts, _ = np.histogram(ef, bins=edges)
    reference = {
        "share_treated": float(tf.mean()),
        "terms": terms,
        "propensity_edges": [float(v) for v in edges],
        "propensity_counts": [float(v) for v in pcounts],
        "propensity_deciles": [float(v) for v in deciles],
        "propensity_decile_counts": [float(v) for v in dcounts],
    }

    X, e = draw(rng, N_RUN, 0.15)
    t = (rng.random(N_RUN) < e).astype(int)
    y = 1.0 + 2.0 * t + X[:, 0] + 0.5 * X[:, 1] + rng.normal(0, 1, N_RUN)
    mu0 = 1.0 + X[:, 0] + 0.5 * X[:, 1]
    mu1 = mu0 + 2.0
    region = rng.choice(4, size=N_RUN, p=[0.45, 0.35, 0.19, 0.01])
    tnull = rng.random(N_RUN) < 0.01
    ynull = rng.random(N_RUN) < 0.02
    os.makedirs(FIX, exist_ok=True)
    with open(os.path.join(FIX, "rows.csv"), "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(TERMS + ["region", "t", "y", "e", "mu0", "mu1"])
        for i in range(N_RUN):
            w.writerow([repr(float(v)) for v in X[i]] + [
                REGIONS[region[i]] if region[i] < 3 else "",
                "" if tnull[i] else str(t[i]),
                "" if ynull[i] else repr(float(y[i])),
                repr(float(e[i])), repr(float(mu0[i])), repr(float(mu1[i]))])
    with open(os.path.join(FIX, "reference.json"), "w") as f:
        json.dump(reference, f, indent=1)
        f.write("\n")


def read_fixture():
    with open(os.path.join(FIX, "rows.csv")) as f:
        rows = list(csv.DictReader(f))
    with open(os.path.join(FIX, "reference.json")) as f:
        ref = json.load(f)
    X = np.array([[float(r[c]) for c in TERMS] for r in rows])
    t = np.array([int(r["t"]) if r["t"] != "" else -1 for r in rows])
    e = np.array([float(r["e"]) for r in rows])
    region = np.array([r["region"] if r["region"] != "" else "(null)" for r in rows])
    return X, t, e, region, ref, len(rows)


def smd_denominator(estimand, vt, vc):
    if estimand == "att":
        return np.sqrt(vt)
    if estimand == "atc":
        return np.sqrt(vc)
    return np.sqrt((vt + vc) / 2)


def balance(X, t, w, edges, estimand):
    out = []
    for j, name in enumerate(TERMS):
        x = X[:, j]
        xt, xc = x[t == 1], x[t == 0]
        dt = DescrStatsW(xt, weights=w[t == 1], ddof=0)
        dc = DescrStatsW(xc, weights=w[t == 0], ddof=0)
        vt, vc = xt.var(ddof=1), xc.var(ddof=1)
        d = smd_denominator(estimand, vt, vc)
        ks = 0.0
        for edge in edges[j]:
            ft = w[t == 1][xt <= edge].sum() / w[t == 1].sum()
            fc = w[t == 0][xc <= edge].sum() / w[t == 0].sum()
            ks = max(ks, abs(ft - fc))
        out.append({
            "term": name,
            "mean_treated": xt.mean(), "mean_control": xc.mean(),
            "var_treated": vt, "var_control": vc,
            "mean_treated_weighted": dt.mean, "mean_control_weighted": dc.mean,
            "var_treated_weighted": dt.var, "var_control_weighted": dc.var,
            "smd_unweighted": (xt.mean() - xc.mean()) / d,
            "smd_weighted": (dt.mean - dc.mean) / d,
            "variance_ratio_weighted": dt.var / dc.var,
            "ks_weighted": ks,
        })
    return out


def psi(observed, expected):
    a = np.maximum(observed / observed.sum(), PSI_FLOOR)
    f = np.maximum(expected / expected.sum(), PSI_FLOOR)
    return float(np.sum((a - f) * np.log(a / f)))


def arm_summary(t, w):
    out = {}
    for arm, k in (("treated", 1), ("control", 0)):
        wa = w[t == k]
        out[arm] = {"n": int(len(wa)), "sum_w": wa.sum(), "sum_w2": (wa**2).sum(),
                    "ess": wa.sum() ** 2 / (wa**2).sum()}
    return out


def reference_values():
    X, t, e, region, ref, n = read_fixture()
    keep = t >= 0
    edges = [tr["edges"] for tr in ref["terms"]]
    pedges = np.array(ref["propensity_edges"])
    deciles = np.array(ref["propensity_deciles"])
    observed = np.bincount(np.searchsorted(deciles, e[keep], side="left"), minlength=len(deciles) + 1)
    expected = np.array(ref["propensity_decile_counts"])
    out = {"rows": n, "null_treatment": int((~keep).sum()),
           "psi": psi(observed.astype(float), expected),
           "decile_counts": [int(v) for v in observed],
           "shift_sd": [(X[keep, j].mean() - tr["mean"]) / tr["sd"] for j, tr in enumerate(ref["terms"])],
           "e_below_0_01": {"treated": int(((e < 0.01) & (t == 1)).sum()), "control": int(((e < 0.01) & (t == 0)).sum())},
           "e_above_0_99": {"treated": int(((e > 0.99) & (t == 1)).sum()), "control": int(((e > 0.99) & (t == 0)).sum())},
           "propensity_counts": {"treated": [int(v) for v in np.histogram(e[t == 1], bins=pedges)[0]],
                                 "control": [int(v) for v in np.histogram(e[t == 0], bins=pedges)[0]]},
           "estimands": {}}
    Xk, tk, ek, rk = X[keep], t[keep], e[keep], region[keep]
    for estimand in ("ate", "att", "atc", "overlap"):
        w = weight(estimand, tk, ek)
        seg = {}
        for r in sorted(set(region)):
            m = rk == r
            s = arm_summary(tk[m], w[m])
            b = balance(Xk[m], tk[m], w[m], edges, estimand)
            s["rows"] = int((region == r).sum())
            s["max_abs_smd_weighted"] = max(abs(v["smd_weighted"]) for v in b)
            seg[r] = s
        top = {}
        for arm, k in (("treated", 1), ("control", 0)):
            wa = np.sort(w[tk == k])[::-1][:10]
            top[arm] = {"weights": list(wa), "share": wa.sum() / w[tk == k].sum()}
        out["estimands"][estimand] = {
            "arms": arm_summary(tk, w),
            "balance": balance(Xk, tk, w, edges, estimand),
            "propensity_weighted": {
                "treated": list(np.histogram(ek[tk == 1], bins=pedges, weights=w[tk == 1])[0]),
                "control": list(np.histogram(ek[tk == 0], bins=pedges, weights=w[tk == 0])[0])},
            "largest_weights": top,
            "segments": seg,
        }
    os.makedirs(REF, exist_ok=True)
    with open(os.path.join(REF, "balance.json"), "w") as f:
        json.dump(out, f, indent=1, default=float)
        f.write("\n")


if __name__ == "__main__":
    make_fixture()
    reference_values()
