#!/usr/bin/python3
"""Reference values for heft's model fitters (package fit).

Makes seeded datasets, writes each as testdata/fixtures/glm/<name>.csv and
fits them with statsmodels (GLM Binomial for the treatment, OLS or GLM
Binomial per arm for the outcome). Ridge fits are computed independently
with scipy.optimize on the exact penalized negative log-likelihood.
Diagnostics (AUC, quantiles) come from scipy.stats.mannwhitneyu and
numpy.quantile. Results go to testdata/ref/glm/<name>.json.

Run from the repository root with Debian's interpreter:

    /usr/bin/python3 testdata/gen/glm_reference.py
"""

import csv
import json
import os
import platform
import sys

import numpy as np
import scipy
import scipy.optimize
import scipy.stats
import statsmodels
import statsmodels.api as sm

COMMAND = "/usr/bin/python3 testdata/gen/glm_reference.py"
ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..")
FIX = os.path.join(ROOT, "testdata", "fixtures", "glm")
REF = os.path.join(ROOT, "testdata", "ref", "glm")

VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "statsmodels": statsmodels.__version__,
}


def expit(v):
    return 1.0 / (1.0 + np.exp(-v))


def dummies(rng, n, name, levels, probs):
    """A categorical column as 0/1 columns named like heft's terms; the
    first level is the reference and gets no column."""
    idx = rng.choice(len(levels), size=n, p=probs)
    cols = {}
    for k, lev in enumerate(levels[1:], start=1):
        cols[f"{name}={lev}"] = (idx == k).astype(float)
    return cols


def write_csv(name, cols, t, y):
    names = list(cols)
    path = os.path.join(FIX, name + ".csv")
    with open(path, "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(names + ["t", "y"])
        for i in range(len(t)):
            row = [repr(float(cols[c][i])) for c in names]
            row.append(str(int(t[i])))
            row.append(repr(float(y[i])))
            w.writerow(row)
    return names


def design(cols, names):
    X = np.column_stack([cols[c] for c in names])
    return sm.add_constant(X, prepend=True, has_constant="add")


def glm_binomial(X, v):
    res = sm.GLM(v, X, family=sm.families.Binomial()).fit(tol=1e-13, maxiter=200)
    # Same fit by Newton on the log-likelihood: the two must agree.
    res2 = sm.Logit(v, X).fit(method="newton", tol=1e-13, maxiter=200, disp=0)
    assert np.allclose(res.params, res2.params, rtol=1e-9, atol=1e-12), "GLM and Logit disagree"
    return {
        "family": "binomial",
        "coef": res.params.tolist(),
        "bse": res.bse.tolist(),
        "cov_params": res.cov_params().tolist(),
        "llf": float(res.llf),
        "deviance": float(res.deviance),
        "iterations": int(res.fit_history["iteration"]),
        "fitted": None,
    }, res


def ols(X, v):
    res = sm.OLS(v, X).fit()
    return {
        "family": "gaussian",
        "coef": res.params.tolist(),
        "bse": res.bse.tolist(),
        "cov_params": res.cov_params().tolist(),
        "llf": float(res.llf),
        "ssr": float(res.ssr),
        "scale": float(res.scale),
    }


def ridge_logistic(X, v, lam):
    """Maximizes ℓ(β) − (λ/2) Σ_{j≥1} (s_j β_j)², s_j the sample SD (ddof=1)
    of column j, directly on the original scale with scipy's trust-region
    Newton method; returns coefficients, the inverse penalized Hessian and
    the unpenalized log-likelihood."""
    s = X[:, 1:].std(axis=0, ddof=1)
    pen = np.concatenate([[0.0], lam * s * s])

    def nll(b):
        eta = X @ b
        return float(np.sum(np.logaddexp(0.0, eta) - v * eta) + 0.5 * np.sum(pen * b * b))

    def grad(b):
        mu = expit(X @ b)
        return X.T @ (mu - v) + pen * b

    def hess(b):
        mu = expit(X @ b)
        w = mu * (1 - mu)
        return (X * w[:, None]).T @ X + np.diag(pen)

    b0 = np.zeros(X.shape[1])
    res = scipy.optimize.minimize(nll, b0, jac=grad, hess=hess, method="trust-exact",
                                  options={"gtol": 1e-11, "maxiter": 1000})
    b = res.x
    # Polish with plain Newton steps on the exact gradient and Hessian.
    for _ in range(5):
        b = b - np.linalg.solve(hess(b), grad(b))
    g = grad(b)
    cov = np.linalg.inv(hess(b))
    eta = X @ b
    llf = float(np.sum(v * eta - np.logaddexp(0.0, eta)))
    return {
        "family": "binomial",
        "ridge": lam,
        "coef": b.tolist(),
        "bse": np.sqrt(np.diag(cov)).tolist(),
        "cov_params": cov.tolist(),
        "llf": llf,
        "deviance": -2 * llf,
        "max_abs_gradient": float(np.max(np.abs(g))),
        "optimizer": "scipy.optimize.minimize(method='trust-exact', gtol=1e-11) then 5 Newton steps",
    }


def dump(name, obj):
    obj["generator"] = "testdata/gen/glm_reference.py"
    obj["command"] = COMMAND
    obj["versions"] = VERSIONS
    with open(os.path.join(REF, name + ".json"), "w") as f:
        json.dump(obj, f, indent=1)
        f.write("\n")


def fixture(name, seed, cols, lin_t, y_of, kind="continuous", ridge=None):
    """Draws the treatment from expit(lin_t) with its own seeded stream."""
    rng_t = np.random.default_rng(seed)
    t = (rng_t.random(len(lin_t)) < expit(lin_t)).astype(float)
    y = y_of(t)
    names = write_csv(name, cols, t, y)
    X = design(cols, names)
    out = {"name": name, "n": int(len(t)), "terms": ["intercept"] + names,
           "n_treated": int(t.sum())}
    if ridge is None:
        prop, res = glm_binomial(X, t)
        e = np.asarray(res.mu)
        u = scipy.stats.mannwhitneyu(e[t == 1], e[t == 0], alternative="two-sided")
        prop["auc"] = float(u.statistic) / (t.sum() * (len(t) - t.sum()))
        prop.pop("fitted")
        out["propensity"] = prop
        arms = {}
        for arm, val in (("treated", 1.0), ("control", 0.0)):
            m = t == val
            if kind == "continuous":
                arms[arm] = ols(X[m], y[m])
            else:
                r, _ = glm_binomial(X[m], y[m])
                r.pop("fitted")
                arms[arm] = r
        out["outcome"] = {"kind": kind, **arms}
    else:
        prop = ridge_logistic(X, t, ridge)
        # Cross-check the penalty scaling with statsmodels, whose objective
        # is −ℓ/n + Σ_j α_j β_j²/2: α_j = λ s_j²/n is the same problem. Its
        # coordinate descent stops far short of 1e-6, so it is not the
        # reference, only a check that both solve one problem.
        s = X[:, 1:].std(axis=0, ddof=1)
        alpha = np.concatenate([[0.0], ridge * s * s / len(t)])
        reg = sm.GLM(t, X, family=sm.families.Binomial()).fit_regularized(
            alpha=alpha, L1_wt=0.0, cnvrg_tol=1e-14, maxiter=10000)
        rel = float(np.max(np.abs(reg.params - prop["coef"]) / np.abs(prop["coef"])))
        assert rel < 1e-2, f"statsmodels fit_regularized disagrees: {rel}"
        prop["statsmodels_fit_regularized_max_rel_diff"] = rel
        out["propensity"] = prop
    dump(name, out)


def main():
    os.makedirs(FIX, exist_ok=True)
    os.makedirs(REF, exist_ok=True)

    # small: n=200, three numeric terms.
    rng = np.random.default_rng(20240601)
    n = 200
    cols = {"x1": rng.normal(size=n), "x2": rng.normal(size=n), "x3": rng.uniform(-1, 1, size=n)}
    lin = 0.3 + 0.8 * cols["x1"] - 0.5 * cols["x2"] + 0.2 * cols["x3"]
    noise = rng.normal(size=n)
    fixture("small", 11, cols, lin, lambda t: 1 + 2 * t + cols["x1"] - 0.5 * cols["x3"] + noise)

    # medium: n=5000, eight terms: four numeric (one on a large scale with a
    # large mean, to exercise the internal standardization), a four-level
    # categorical as three dummies and a binary flag.
    rng = np.random.default_rng(20240602)
    n = 5000
    cols = {
        "age": rng.normal(45, 12, size=n),
        "income": rng.lognormal(10.5, 0.6, size=n),
        "tenure": rng.exponential(3.0, size=n),
        "score": rng.normal(size=n),
    }
    cols.update(dummies(rng, n, "region", ["east", "north", "south", "west"], [0.4, 0.25, 0.2, 0.15]))
    cols["member"] = (rng.random(n) < 0.3).astype(float)
    lin = (-2.0 + 0.03 * cols["age"] + 0.00001 * cols["income"] - 0.1 * cols["tenure"]
           + 0.4 * cols["score"] + 0.5 * cols["region=north"] - 0.3 * cols["region=south"]
           + 0.2 * cols["region=west"] + 0.6 * cols["member"])
    noise = rng.normal(scale=2.0, size=n)
    fixture("medium", 12, cols, lin, lambda t: (10 + 1.5 * t + 0.1 * cols["age"] + 0.0001 * cols["income"]
                                            + cols["score"] + 2 * cols["member"] + noise))

    # confounded: strong selection, propensities near 0 and 1 but no
    # separation.
    rng = np.random.default_rng(20240603)
    n = 2000
    cols = {"x1": rng.normal(size=n), "x2": rng.normal(size=n), "x3": rng.normal(size=n),
            "x4": rng.binomial(1, 0.5, size=n).astype(float)}
    lin = 0.5 + 2.5 * cols["x1"] - 2.0 * cols["x2"] + 1.0 * cols["x3"] + 1.5 * cols["x4"]
    noise = rng.normal(size=n)
    fixture("confounded", 13, cols, lin, lambda t: 3 * t + 2 * cols["x1"] - cols["x2"] + noise)

    # binary: a 0/1 outcome, logistic outcome models per arm.
    rng = np.random.default_rng(20240604)
    n = 3000
    cols = {"x1": rng.normal(size=n), "x2": rng.normal(size=n)}
    cols.update(dummies(rng, n, "plan", ["basic", "plus", "pro"], [0.5, 0.3, 0.2]))
    lin = -0.2 + 0.7 * cols["x1"] + 0.4 * cols["plan=plus"] + 0.9 * cols["plan=pro"]
    u = rng.random(n)
    fixture("binary", 14, cols, lin,
            lambda t: (u < expit(-0.5 + 0.8 * t + 0.6 * cols["x1"] - 0.4 * cols["x2"] + 0.5 * cols["plan=pro"])).astype(float),
            kind="binary")

    # ridge: five terms, two of them strongly correlated, λ = 2.
    rng = np.random.default_rng(20240605)
    n = 500
    z = rng.normal(size=n)
    cols = {"x1": z + 0.05 * rng.normal(size=n), "x2": z + 0.05 * rng.normal(size=n),
            "x3": rng.normal(3, 2, size=n), "x4": rng.uniform(0, 10, size=n),
            "x5": rng.binomial(1, 0.4, size=n).astype(float)}
    lin = 0.2 + 0.6 * cols["x1"] + 0.4 * cols["x2"] - 0.2 * cols["x3"] + 0.1 * cols["x4"] + 0.5 * cols["x5"]
    fixture("ridge", 15, cols, lin, lambda t: t, ridge=2.0)

    # ridge_separated: the level group=b is seen among treated rows only
    # (quasi-complete separation); the ridge optimum exists, λ = 1.
    rng = np.random.default_rng(20240606)
    n = 400
    x1 = rng.normal(size=n)
    b = (rng.random(n) < 0.15).astype(float)
    cols = {"x1": x1, "group=b": b}
    lin = 0.1 + 0.8 * x1 + 100.0 * b  # expit(≥ 90) rounds to 1: b rows are all treated
    fixture("ridge_separated", 16, cols, lin, lambda t: t, ridge=1.0)

    diagnostics()


def diagnostics():
    rng = np.random.default_rng(20240607)
    cases = []
    # Continuous scores, scores with many ties, a perfect and a reversed
    # ranking, and a tiny case.
    s = rng.random(300)
    t = (rng.random(300) < 0.4).astype(int)
    cases.append(("continuous", s, t))
    s = np.round(rng.random(400), 1)
    t = (rng.random(400) < s).astype(int)
    cases.append(("ties", s, t))
    s = np.arange(20) / 20.0
    cases.append(("perfect", s, (s >= 0.5).astype(int)))
    cases.append(("reversed", s, (s < 0.5).astype(int)))
    cases.append(("tiny", np.array([0.2, 0.2, 0.7]), np.array([0, 1, 1])))
    auc = []
    for name, s, t in cases:
        u = scipy.stats.mannwhitneyu(s[t == 1], s[t == 0], alternative="two-sided")
        auc.append({"name": name, "score": s.tolist(), "t": t.tolist(),
                    "auc": float(u.statistic) / (t.sum() * (len(t) - t.sum()))})
    qs = [0, 0.01, 0.05, 0.1, 0.25, 1 / 3, 0.5, 0.75, 0.9, 0.95, 0.99, 1]
    qcases = [
        ("normal", rng.normal(size=1001)),
        ("ties", np.round(rng.exponential(size=250), 1)),
        ("one", np.array([3.5])),
        ("two", np.array([-1.0, 4.0])),
        ("even", rng.uniform(size=10)),
    ]
    quant = []
    for name, x in qcases:
        quant.append({"name": name, "x": x.tolist(), "q": qs,
                      "value": np.quantile(x, qs, method="linear").tolist(),
                      "deciles": np.quantile(x, np.arange(1, 10) / 10, method="linear").tolist()})
    dump("diagnostics", {"name": "diagnostics", "auc": auc, "quantiles": quant,
                         "auc_source": "scipy.stats.mannwhitneyu U1 / (n1 n0)",
                         "quantile_source": "numpy.quantile(method='linear')"})


if __name__ == "__main__":
    if not sys.executable.startswith("/usr/bin/python3"):
        print("run with Debian's /usr/bin/python3", file=sys.stderr)
    main()
