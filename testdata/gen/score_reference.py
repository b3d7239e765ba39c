#!/usr/bin/python3
"""Reference values for heft's score package, computed with numpy.

Regenerate (from the repository root, with Debian's python3-numpy and python3-scipy):

    /usr/bin/python3 testdata/gen/score_reference.py

It writes the fixture testdata/fixtures/score/basic.csv (seeded, so the
same bytes every time) and basic_coef.json (coefficients chosen by hand so
that some propensities fall below 0.02 and above 0.98), then computes with
numpy, independently of heft's Go code, the linear predictors, propensities,
outcome predictions, the fit sample's weight quantiles (numpy.quantile,
method "linear", i.e. Hyndman & Fan type 7), truncation caps
(numpy.interp over those quantiles), scipy.special.expit for the logistic, and the weights for every estimand and
policy, and writes them to testdata/ref/score/basic.json.
"""
import csv
import json
import os

import numpy as np
import scipy
from scipy.special import expit

ROOT = os.path.normpath(os.path.join(os.path.dirname(__file__), "..", ".."))
FIX = os.path.join(ROOT, "testdata", "fixtures", "score")
REF = os.path.join(ROOT, "testdata", "ref", "score")

TERMS = ["intercept", "x1", "x2", "x3", "d1", "d2"]
COEF = {
    "propensity": [-0.3, 0.8, -0.5, 0.9, 0.7, -1.2],
    "outcome_treated": [1.5, 0.4, -0.2, 0.3, 0.5, -0.6],
    "outcome_control": [0.5, 0.3, 0.1, -0.25, 0.2, 0.4],
}


def write_fixture(n=80, seed=20260601):
    rng = np.random.default_rng(seed)
    x1 = rng.normal(0, 1, n)
    x2 = rng.normal(0, 2, n)
    x3 = rng.exponential(2.0, n) - 2.0
    d1 = (rng.random(n) < 0.4).astype(int)
    d2 = (rng.random(n) < 0.3).astype(int)
    X = np.column_stack([np.ones(n), x1, x2, x3, d1, d2])
    e = logistic(X @ np.array(COEF["propensity"]))
    t = (rng.random(n) < e).astype(int)
    null = rng.random(n) < 0.06
    with open(os.path.join(FIX, "basic.csv"), "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["x1", "x2", "x3", "d1", "d2", "t"])
        for i in range(n):
            w.writerow([repr(float(x1[i])), repr(float(x2[i])), repr(float(x3[i])),
                        int(d1[i]), int(d2[i]), "" if null[i] else int(t[i])])
    with open(os.path.join(FIX, "basic_coef.json"), "w") as f:
        json.dump({"terms": TERMS, **COEF}, f, indent=1)
        f.write("\n")


def read_fixture():
    with open(os.path.join(FIX, "basic.csv")) as f:
        rows = list(csv.DictReader(f))
    X = np.array([[1.0] + [float(r[k]) for k in TERMS[1:]] for r in rows])
    t = np.array([-1 if r["t"] == "" else int(r["t"]) for r in rows])
    return X, t


def logistic(lp):
    # scipy's expit, an implementation independent of heft's.
    return expit(lp)


def weights(est, t, e):
    T = (t == 1).astype(float)
    C = (t == 0).astype(float)
    if est == "ate":
        return T / e + C / (1 - e)
    if est == "att":
        return T + C * e / (1 - e)
    if est == "atc":
        return T * (1 - e) / e + C
    if est == "overlap":
        return T * (1 - e) + C * e
    raise ValueError(est)


def grid():
    return np.sort(np.concatenate([np.arange(201) / 200, [0.999, 0.9995, 0.9999]]))


def main():
    os.makedirs(FIX, exist_ok=True)
    os.makedirs(REF, exist_ok=True)
    write_fixture()
    X, t = read_fixture()
    valid = t >= 0
    share = float(np.mean(t[valid] == 1))
    lp = X @ np.array(COEF["propensity"])
    e_raw = logistic(lp)
    q = grid()

    wq = {}
    for est in ["ate", "att", "atc", "overlap"]:
        w = weights(est, t, e_raw)[valid]
        ws = w * np.where(t[valid] == 1, share, 1 - share)
        wq[est] = np.quantile(w, q, method="linear")
        wq[est + "/stabilized"] = np.quantile(ws, q, method="linear")

    policies = [
        {},
        {"clip": 0.02},
        {"trim": 0.05},
        {"clip": 0.02, "trim": 0.05},
        {"truncate_quantile": 0.9725},
        {"truncate_quantile": 0.995},
        {"clip": 0.01, "trim": 0.03, "truncate_quantile": 0.9},
    ]
    cases = []
    for est in ["ate", "att", "atc", "overlap"]:
        for stab in [False, True]:
            for pol in policies:
                clip = pol.get("clip", 0.0)
                trim = pol.get("trim", 0.0)
                tq = pol.get("truncate_quantile", 0.0)
                e = e_raw.copy()
                clipped = 0
                if clip > 0:
                    clipped = int(np.sum((e < clip) | (e > 1 - clip)))
                    e = np.clip(e, clip, 1 - clip)
                w = weights(est, t, e)
                if stab:
                    w = w * np.where(t == 1, share, 1 - share)
                insup = np.ones(len(e), dtype=bool)
                if trim > 0:
                    insup = (e >= trim) & (e <= 1 - trim)
                cap = 0.0
                truncated = 0
                if tq > 0:
                    key = est + ("/stabilized" if stab else "")
                    cap = float(np.interp(tq, q, wq[key]))
                    truncated = int(np.sum(valid & insup & (w > cap)))
                    w = np.minimum(w, cap)
                w = np.where(insup, w, 0.0)
                cases.append({
                    "estimand": est, "stabilize": stab, "clip": clip, "trim": trim,
                    "truncate_quantile": tq, "cap": cap,
                    "clipped": clipped, "trimmed": int(np.sum(~insup)), "truncated": truncated,
                    "e": e.tolist(),
                    "w": [float(v) if ok else None for v, ok in zip(w, valid)],
                    "in_support": insup.tolist(),
                })

    lp1 = X @ np.array(COEF["outcome_treated"])
    lp0 = X @ np.array(COEF["outcome_control"])
    out = {
        "source": "testdata/gen/score_reference.py (numpy %s, scipy %s)" % (np.__version__, scipy.__version__),
        "command": "/usr/bin/python3 testdata/gen/score_reference.py",
        "share_treated": share,
        "lp": lp.tolist(),
        "e_raw": e_raw.tolist(),
        "mu0_gaussian": lp0.tolist(),
        "mu1_gaussian": lp1.tolist(),
        "mu0_binomial": logistic(lp0).tolist(),
        "mu1_binomial": logistic(lp1).tolist(),
        "weight_quantiles": {k: [[float(a), float(b)] for a, b in zip(q, v)] for k, v in sorted(wq.items())},
        "cases": cases,
    }
    with open(os.path.join(REF, "basic.json"), "w") as f:
        json.dump(out, f, indent=None, separators=(",", ":"))
        f.write("\n")


if __name__ == "__main__":
    main()
