#!/usr/bin/python3
"""Golden values for calib's power_of_mean weighting (θ) from numpy and scipy.

Run:  /usr/bin/python3 testdata/gen/make_golden_theta.py > testdata/golden/scipy_theta_4pl.json
(from the repository root; Debian packages python3-numpy and python3-scipy).

The data are invented: a plate-reader immunoassay, 8 calibrator levels in
triplicate wells, responses from a 4PL with noise whose SD grows as the
mean to the power 0.8 (numpy's seeded generator, so the file is
reproducible). No general-purpose library offers this variance-function
estimate for a non-linear curve, so this script is an independent
implementation of the procedure calib documents, with numpy and scipy doing
every computation:

  1. an unweighted 4PL fit (scipy.optimize.curve_fit, method "lm", i.e.
     MINPACK, tolerances 1e-15, from a rough start, not calib's self-start);
  2. θ = the least-squares slope of ln(level SD) on ln|ŷ(level)| over the
     levels (numpy.polyfit, degree 1), clamped to [0, 2];
  3. weights wᵢ = max(|ŷᵢ|, floor)^(−2θ), floor the smallest non-zero
     |ŷ| at a calibrator; a weighted refit from the previous coefficients
     (curve_fit with sigma = 1/√w);
  4. repeat 2–3 until θ moves by less than 1e-4 (at most 20 rounds); the
     reported θ is the last one computed and the coefficients those of the
     last refit.

The covariance is curve_fit's (absolute_sigma=False: s²(JᵀWJ)⁻¹ with the
weights normalised to sum to n, as calib reports it).
"""

import json

import numpy as np
import scipy
import scipy.optimize as so


def f4(x, a, b, c, d):
    x = np.asarray(x, dtype=float)
    return d + (a - d) / (1.0 + (x / c) ** b)


def j4(x, a, b, c, d):
    x = np.asarray(x, dtype=float)
    s = (x / c) ** b
    q = 1.0 + s
    k = (a - d) * s / q ** 2
    return np.column_stack([1 / q, -k * np.log(x / c), k * b / c, 1 - 1 / q])


rng = np.random.default_rng(20261204)
levels = np.array([0.4, 1.0, 2.5, 6.0, 15.0, 40.0, 100.0, 250.0])
true = (0.06, 1.1, 30.0, 3.2)
X, Y = [], []
for xv in levels:
    mu = f4(xv, *true)
    for _ in range(3):
        X.append(xv)
        Y.append(round(float(mu + 0.02 * mu ** 0.8 * rng.standard_normal()), 4))
X, Y = np.array(X), np.array(Y)


def fit(w, p0):
    wn = w * len(w) / w.sum()
    p, cov = so.curve_fit(f4, X, Y, p0=p0, sigma=1 / np.sqrt(wn), jac=j4, method="lm",
                          ftol=1e-15, xtol=1e-15, gtol=1e-15, maxfev=100000)
    return p, cov


p, _ = fit(np.ones_like(Y), [0.1, 1.0, 20.0, 3.0])
p_unweighted = p.copy()
sd = np.array([Y[X == xv].std(ddof=1) for xv in levels])
theta, rounds, history = 0.0, 0, []
while rounds < 20:
    yl = f4(levels, *p)
    th = float(np.polyfit(np.log(np.abs(yl)), np.log(sd), 1)[0])
    th = min(max(th, 0.0), 2.0)
    rounds += 1
    yh = np.abs(f4(X, *p))
    floor = yh[yh > 0].min()
    w = np.maximum(yh, floor) ** (-2 * th)
    p, cov = fit(w, p)
    history.append(th)
    if abs(th - theta) < 1e-4:
        theta = th
        break
    theta = th

print(json.dumps({
    "source": f"testdata/gen/make_golden_theta.py, scipy {scipy.__version__}, numpy {np.__version__}",
    "x": X.tolist(), "y": Y.tolist(),
    "levels": [f"L{i + 1}" for i in range(len(levels))],
    "unweighted_params": p_unweighted.tolist(),
    "theta": theta, "rounds": rounds, "theta_history": history,
    "params": p.tolist(), "cov": cov.tolist(),
}, indent=1))
