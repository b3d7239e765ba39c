#!/usr/bin/python3
"""Reference values for aggregate/effects.go.

Regenerate (from the repository root, Debian's python3-numpy and
python3-statsmodels):

    /usr/bin/python3 testdata/gen/effects_reference.py

Writes, per scenario, testdata/fixtures/effects/<name>.csv (the scored rows
as the Go test feeds them to Effects), testdata/fixtures/effects/<name>.json
(policy, coefficients, covariances) and testdata/ref/effects/<name>.json (the
expected estimates and standard errors).

The estimators are written out directly from their formulas, each with its
own influence function phi_i computed row by row; the standard error is
sqrt(sum((phi - mean(phi))^2) / n^2). The delta-method term differentiates the
estimators numerically (central differences, step 1e-5) in the model
coefficients, recomputing e = clip(expit(x beta)), the written weight
min(share * w(e), cap) and the outcome predictions from the coefficients; the
trimmed set is held fixed. The fitted models are statsmodels fits on the same
rows (any coefficients and covariances would do for checking the algebra).
"""

import json
import os

import numpy as np
import statsmodels.api as sm

ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")
FIX = os.path.join(ROOT, "fixtures", "effects")
REF = os.path.join(ROOT, "ref", "effects")
SEED = 20261201
N = 1500
STEP = 1e-5


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


def se_of(phi):
    n = len(phi)
    return float(np.sqrt(np.sum((phi - phi.mean()) ** 2) / n**2))


def estimators(e, t, y, m0, m1, wrun, run, with_outcome):
    """estimand -> estimator -> (estimate, phi)."""
    n = len(y)
    T = t.astype(float)
    U = 1 - T
    n1, n0 = T.sum(), U.sum()
    out = {k: {} for k in ("ate", "att", "atc", "overlap")}

    psi = T * y / e - U * y / (1 - e)
    tau = psi.mean()
    out["ate"]["ipw"] = (tau, psi - tau)
    psi = T * y - U * y * e / (1 - e)
    tau = psi.sum() / n1
    out["att"]["ipw"] = (tau, n / n1 * (psi - tau * T))
    psi = T * y * (1 - e) / e - U * y
    tau = psi.sum() / n0
    out["atc"]["ipw"] = (tau, n / n0 * (psi - tau * U))

    for k in out:
        w = wrun if k == run else weight(k, t, e)
        s1, s0 = np.sum(w * T), np.sum(w * U)
        mu1, mu0 = np.sum(w * T * y) / s1, np.sum(w * U * y) / s0
        phi = n * (w * T * (y - mu1) / s1 - w * U * (y - mu0) / s0)
        out[k]["hajek"] = (mu1 - mu0, phi)

    if with_outcome:
        psi = m1 - m0 + T * (y - m1) / e - U * (y - m0) / (1 - e)
        tau = psi.mean()
        out["ate"]["aipw"] = (tau, psi - tau)
        psi = T * (y - m0) - U * e * (y - m0) / (1 - e)
        tau = psi.sum() / n1
        out["att"]["aipw"] = (tau, n / n1 * (psi - tau * T))
        psi = T * (1 - e) * (y - m1) / e - U * (y - m1)
        tau = psi.sum() / n0
        out["atc"]["aipw"] = (tau, n / n0 * (psi - tau * U))
        h = e * (1 - e)
        sh, s1, s0 = h.sum(), np.sum(T * (1 - e)), np.sum(U * e)
        ta = np.sum(h * (m1 - m0)) / sh
        tb = np.sum(T * (1 - e) * (y - m1)) / s1
        tc = np.sum(U * e * (y - m0)) / s0
        phi = n * ((h * (m1 - m0) - ta * h) / sh
                   + T * (1 - e) * (y - m1 - tb) / s1
                   - U * e * (y - m0 - tc) / s0)
        out["overlap"]["aipw"] = (ta + tb - tc, phi)
    return out


class Scenario:
    def __init__(self, name, policy, outcome):
        self.name, self.policy, self.outcome = name, policy, outcome


def main():
    rng = np.random.default_rng(SEED)
    x1 = rng.normal(size=N)
    x2 = (rng.random(N) < 0.4).astype(float)
    x3 = rng.uniform(-1, 1, size=N)
    X = np.column_stack([np.ones(N), x1, x2, x3])
    t = (rng.random(N) < expit(-0.3 + 1.1 * x1 - 0.6 * x2 + 0.8 * x3)).astype(int)
    y = 1 + 0.8 * x1 - 0.5 * x2 + 0.4 * x3 + t * (1.5 + 0.5 * x1) + rng.normal(size=N)
    yb = (rng.random(N) < expit(-0.2 + 0.7 * x1 + 0.3 * x2 - 0.4 * x3 + 0.8 * t)).astype(float)
    t[rng.choice(N, 15, replace=False)] = -1
    y_valid = np.ones(N, dtype=bool)
    y_valid[rng.choice(N, 10, replace=False)] = False

    ok = t >= 0
    prop = sm.Logit(t[ok], X[ok]).fit(disp=0, tol=1e-12, maxiter=100)
    beta, cov_b = prop.params, prop.cov_params()
    share = float(np.mean(t[ok]))
    fits = {}
    for kind, yy in (("continuous", y), ("binary", yb)):
        arms = {}
        for arm in (0, 1):
            r = ok & (t == arm) & y_valid
            if kind == "continuous":
                f = sm.OLS(yy[r], X[r]).fit()
            else:
                f = sm.GLM(yy[r], X[r], family=sm.families.Binomial()).fit(tol=1e-12)
            arms[arm] = (f.params, f.cov_params())
        fits[kind] = arms

    att_w = weight("att", t[ok], expit(X[ok] @ beta)) * np.where(t[ok] == 1, share, 1 - share)
    ws = np.sort(att_w)
    k = int(0.9 * len(ws))
    cap = float((ws[k] + ws[k + 1]) / 2)  # between two weights, away from the kink
    scenarios = [
        Scenario("ate_plain", dict(estimand="ate"), "continuous"),
        Scenario("att_clip_stab_cap", dict(estimand="att", clip=0.08, stabilize=True,
                                           cap=cap), "binary"),
        Scenario("overlap_trim", dict(estimand="overlap", trim=0.1), "continuous"),
        Scenario("atc_stab", dict(estimand="atc", stabilize=True), "continuous"),
    ]
    os.makedirs(FIX, exist_ok=True)
    os.makedirs(REF, exist_ok=True)
    for sc in scenarios:
        run_scenario(sc, X, t, y if sc.outcome == "continuous" else yb, y_valid, beta, cov_b,
                     fits[sc.outcome], share)


def run_scenario(sc, X, t, y, y_valid, beta, cov_b, arms, share):
    pol = sc.policy
    run = pol["estimand"]
    clip, trim, cap = pol.get("clip", 0.0), pol.get("trim", 0.0), pol.get("cap", 0.0)
    stab = pol.get("stabilize", False)
    binary = sc.outcome == "binary"
    (g0, cov0), (g1, cov1) = arms[0], arms[1]

    def scored(b, c1, c0):
        lp = X @ b
        e = expit(lp)
        if clip > 0:
            e = np.clip(e, clip, 1 - clip)
        w = weight(run, np.maximum(t, 0), e)
        if stab:
            w = w * np.where(t == 1, share, 1 - share)
        if cap > 0:
            w = np.minimum(w, cap)
        m1, m0 = X @ c1, X @ c0
        if binary:
            m1, m0 = expit(m1), expit(m0)
        return lp, e, w, m0, m1

    lp, e, w, m0, m1 = scored(beta, g1, g0)
    in_support = (e >= trim) & (e <= 1 - trim) if trim > 0 else np.ones(len(e), dtype=bool)
    w = np.where(in_support, w, 0.0)
    used = (t >= 0) & y_valid & in_support

    # No row may sit on a kink of clip or cap within the difference step.
    if clip > 0:
        kink = np.log(clip / (1 - clip))
        assert np.min(np.abs(np.abs(lp[used]) + kink)) > 1e-3, "row near the clip bound"
    if cap > 0:
        assert np.min(np.abs(w[used] - cap)[w[used] != cap]) > 1e-3 * cap, "row near the cap"

    def taus(b, c1, c0):
        _, e, w, m0, m1 = scored(b, c1, c0)
        r = estimators(e[used], t[used], y[used], m0[used], m1[used], w[used], run, True)
        return {k: {s: v[0] for s, v in d.items()} for k, d in r.items()}

    base = estimators(e[used], t[used], y[used], m0[used], m1[used], w[used], run, True)

    def gradient(which, coef):
        g = {k: {s: np.zeros(len(coef)) for s in d} for k, d in base.items()}
        for j in range(len(coef)):
            h = STEP * max(1.0, abs(coef[j]))
            up, dn = coef.copy(), coef.copy()
            up[j] += h
            dn[j] -= h
            args_up = {"b": beta, "c1": g1, "c0": g0}
            args_dn = dict(args_up)
            args_up[which], args_dn[which] = up, dn
            tu, td = taus(**args_up), taus(**args_dn)
            for k in g:
                for s in g[k]:
                    g[k][s][j] = (tu[k][s] - td[k][s]) / (2 * h)
        return g

    gb, gg1, gg0 = gradient("b", beta), gradient("c1", g1), gradient("c0", g0)
    result = {}
    for k, d in base.items():
        result[k] = {}
        for s, (tau, phi) in d.items():
            se = se_of(phi)
            v2 = se**2 + gb[k][s] @ cov_b @ gb[k][s]
            if s == "aipw":
                v2 += gg1[k][s] @ cov1 @ gg1[k][s] + gg0[k][s] @ cov0 @ gg0[k][s]
            result[k][s] = {"estimate": float(tau), "se": se, "se_with_model_uncertainty": float(np.sqrt(v2))}

    cols = {"x1": X[:, 1], "x2": X[:, 2], "x3": X[:, 3], "t": t, "y": y,
            "y_valid": y_valid.astype(int), "e": e, "w": w,
            "in_support": in_support.astype(int), "mu0": m0, "mu1": m1}
    with open(os.path.join(FIX, sc.name + ".csv"), "w") as f:
        f.write(",".join(cols) + "\n")
        for i in range(len(t)):
            f.write(",".join(repr(int(v[i])) if v.dtype.kind in "iub" else repr(float(v[i]))
                             for v in cols.values()) + "\n")
    model = {"policy": pol, "outcome_kind": sc.outcome, "share_treated": share,
             "propensity": {"coef": beta.tolist(), "cov": np.asarray(cov_b).tolist()},
             "treated": {"coef": g1.tolist(), "cov": np.asarray(cov1).tolist()},
             "control": {"coef": g0.tolist(), "cov": np.asarray(cov0).tolist()}}
    with open(os.path.join(FIX, sc.name + ".json"), "w") as f:
        json.dump(model, f, indent=1)
        f.write("\n")
    with open(os.path.join(REF, sc.name + ".json"), "w") as f:
        json.dump({"scenario": sc.name, "rows_used": int(used.sum()),
                   "command": "/usr/bin/python3 testdata/gen/effects_reference.py",
                   "estimates": result}, f, indent=1, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main()
