#!/usr/bin/python3
"""Reference fit for the fit benchmark: statsmodels GLM Binomial on the raw
float64 file written by fitgen (row-major, K terms then the treatment).

    /usr/bin/python3 cmd/heftbench/statsmodels_fit.py fit.f64 20

Prints the first coefficients so a reader can compare them with heft's.
"""
import sys
import time

import numpy as np
import statsmodels.api as sm

path, k = sys.argv[1], int(sys.argv[2])
data = np.fromfile(path, dtype="<f8").reshape(-1, k + 1)
X = sm.add_constant(data[:, :k], prepend=True)
t = data[:, k]
t0 = time.perf_counter()
res = sm.GLM(t, X, family=sm.families.Binomial()).fit(tol=1e-10)
fit_s = time.perf_counter() - t0
import statsmodels
print("statsmodels %s fit alone %.3f s, coef[:3] %s, iterations %d" % (statsmodels.__version__, fit_s, res.params[:3], res.fit_history["iteration"]))
