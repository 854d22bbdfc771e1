#!/usr/bin/python3
"""Golden inverse-prediction intervals of a weighted 4PL by inverting the
prediction band, made with scipy (Debian python3-scipy).

Run from the repository root:
    /usr/bin/python3 testdata/gen/make_golden_band.py > testdata/golden/scipy_band_4pl.json

Data: calib's invented elisaCurve (8 calibrators in duplicate), 1/y^2
weights normalised to sum to n. The 4PL y = d + (a - d)/(1 + (x/c)^b) is
fitted with curve_fit (trf, analytic Jacobian, tolerances 1e-15); the
covariance is s^2 (J'WJ)^-1. For the mean y0 of m readings, the interval is
every x with |f(x) - y0| <= t(0.975; df) * sqrt(s^2/(m w0(x)) + g(x)' Cov g(x)),
w0(x) = scale / f(x)^2 (the 1/y^2 weight of an unknown at x, on the same
scale), g the gradient of f in the parameters; each end is found by brentq
between x_hat and a point outside the band (or reported as null when the
band does not close before 1e6 times the top calibrator).
"""

import json

import numpy as np
import scipy
import scipy.optimize as so
import scipy.stats as st

X = np.array([0.5, 0.5, 1, 1, 2.5, 2.5, 5, 5, 10, 10, 25, 25, 50, 50, 100, 100], float)
Y = np.array([0.081, 0.077, 0.118, 0.124, 0.236, 0.229, 0.432, 0.447,
              0.806, 0.781, 1.542, 1.571, 2.118, 2.071, 2.452, 2.497])
RAW = 1 / Y ** 2
SCALE = len(Y) / RAW.sum()
W = RAW * SCALE


def f4(x, a, b, c, d):
    return d + (a - d) / (1.0 + (x / c) ** b)


def grad(x, p):
    a, b, c, d = p
    s = (x / c) ** b
    q = 1.0 + s
    k = (a - d) * s / q ** 2
    return np.array([1 / q, -k * np.log(x / c), k * b / c, 1 - 1 / q])


def j4(x, a, b, c, d):
    return np.array([grad(v, (a, b, c, d)) for v in x])


p, cov = so.curve_fit(f4, X, Y, p0=[0.05, 1, 10, 3], sigma=1 / np.sqrt(W), jac=j4,
                      method="trf", ftol=1e-15, xtol=1e-15, gtol=1e-15)
r = Y - f4(X, *p)
df = len(Y) - 4
s2 = (W * r ** 2).sum() / df
t = st.t.ppf(0.975, df)


def excess(x, y0, m):
    fx = f4(x, *p)
    g = grad(x, p)
    v = s2 / (m * SCALE / fx ** 2) + g @ cov @ g
    return abs(fx - y0) - t * np.sqrt(v)


out = {"scipy_version": scipy.__version__, "params": list(p), "cov": cov.tolist(),
       "residual_sd": float(np.sqrt(s2)), "df": df, "predictions": []}
for readings in ([0.40, 0.42], [1.0, 1.05], [0.09], [2.3, 2.35]):
    m = len(readings)
    y0 = float(np.mean(readings))
    a, b, c, d = p
    xh = c * ((a - d) / (y0 - d) - 1) ** (1 / b)
    lo = xh
    while excess(lo, y0, m) <= 0 and lo > 1e-9:
        lo /= 1.5
    low = so.brentq(excess, lo, xh, args=(y0, m), xtol=1e-14, rtol=1e-14) if excess(lo, y0, m) > 0 else 0.0
    hi = xh
    while excess(hi, y0, m) <= 0 and hi < 1e8:
        hi *= 1.5
    high = so.brentq(excess, xh, hi, args=(y0, m), xtol=1e-14, rtol=1e-14) if excess(hi, y0, m) > 0 else None
    out["predictions"].append({"readings": readings, "x_hat": float(xh), "low": low, "high": high})
print(json.dumps(out, indent=1))
