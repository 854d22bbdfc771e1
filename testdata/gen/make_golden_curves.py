#!/usr/bin/python3
"""Golden values for calib.FitCurve and CurveFit.Predict from scipy.

Run:  /usr/bin/python3 testdata/gen/make_golden_curves.py > testdata/golden/scipy_curves.json
(from the repository root; Debian package python3-scipy).

The data are invented (an immunoassay plate reader for the logistic models,
a detector with a power response, a saturating detector). Weights are
given raw and normalised here to sum to n, as calib does; scipy sees them as
sigma = 1/sqrt(w) with absolute_sigma=False, so pcov = s^2 (J^T W J)^-1 with
s^2 = sum w r^2 / (n - p), the covariance calib reports.

The fits use scipy.optimize.curve_fit(method="trf") with the analytic
Jacobian written below from the model formulas (independently of the Go
code), tight tolerances (ftol = xtol = gtol = 1e-15) and bounds that keep
b, c, g positive; starting values are rough guesses, not calib's
self-start, so both solvers must find the minimum on their own.

Inverse predictions: x0 solves f(x0) = ybar0 by scipy.optimize.brentq on
the standards' range widened tenfold; the delta-method SE is
sqrt(s^2/(m w0) + g^T Cov g) / |f'(x0)| with the gradient g = df/dbeta and
f'(x0) both taken by central finite differences (scipy.optimize.approx_fprime
style, step 1e-6 relative), not from the closed forms.
"""

import json

import numpy as np
import scipy
import scipy.optimize as so
import scipy.stats


def f5(x, a, b, c, d, g):
    x = np.asarray(x, dtype=float)
    return d + (a - d) / (1.0 + (x / c) ** b) ** g


def f4(x, a, b, c, d):
    return f5(x, a, b, c, d, 1.0)


def j5(x, a, b, c, d, g):
    x = np.asarray(x, dtype=float)
    s = (x / c) ** b
    q = 1.0 + s
    h = q ** (-g)
    with np.errstate(divide="ignore", invalid="ignore"):
        lx = np.where(x > 0, np.log(np.where(x > 0, x, 1.0) / c), 0.0)
    k = (a - d) * g * q ** (-g - 1) * s
    return np.column_stack([h, -k * lx, k * b / c, 1 - h, -(a - d) * h * np.log(q)])


def j4(x, a, b, c, d):
    return j5(x, a, b, c, d, 1.0)[:, :4]


def fpow(x, a, b):
    return a * np.asarray(x, dtype=float) ** b


def jpow(x, a, b):
    x = np.asarray(x, dtype=float)
    v = x ** b
    return np.column_stack([v, a * v * np.log(x)])


def fexp(x, a, b):
    return a * (1 - np.exp(-b * np.asarray(x, dtype=float)))


def jexp(x, a, b):
    x = np.asarray(x, dtype=float)
    e = np.exp(-b * x)
    return np.column_stack([1 - e, a * x * e])


def fexpo(x, a, b, y0):
    return y0 + fexp(x, a, b)


def jexpo(x, a, b, y0):
    return np.column_stack([jexp(x, a, b), np.ones(len(x))])


# Invented immunoassay: 8 calibrators in duplicate, rising 4PL-like curve
# with some asymmetry; relative noise so 1/y^2 weights suit it.
ELISA_X = [0.5, 0.5, 1, 1, 2.5, 2.5, 5, 5, 10, 10, 25, 25, 50, 50, 100, 100]
ELISA_Y = [0.081, 0.077, 0.118, 0.124, 0.236, 0.229, 0.432, 0.447,
           0.806, 0.781, 1.542, 1.571, 2.118, 2.071, 2.452, 2.497]
# Invented competitive assay (falling curve), 8 levels in duplicate.
COMP_X = [0.1, 0.1, 0.3, 0.3, 1, 1, 3, 3, 10, 10, 30, 30, 100, 100, 300, 300]
COMP_Y = [1.902, 1.887, 1.811, 1.836, 1.574, 1.552, 1.102, 1.131,
          0.571, 0.589, 0.262, 0.251, 0.133, 0.129, 0.091, 0.094]
# Invented detector with a power response (y ~ 3 x^0.85).
POW_X = [1, 1, 2, 2, 5, 5, 10, 10, 20, 20, 50, 50]
POW_Y = [3.05, 2.93, 5.41, 5.58, 11.62, 11.21, 21.3, 20.6, 38.1, 39.2, 80.9, 83.4]
# Invented saturating detector with a blank.
EXP_X = [0, 0, 1, 1, 2, 2, 4, 4, 8, 8, 16, 16, 32, 32]
EXP_Y = [0.052, 0.048, 1.86, 1.91, 3.41, 3.33, 5.71, 5.83, 8.42, 8.31, 9.91, 10.02, 10.38, 10.31]


def weights(kind, x, y):
    x, y = np.asarray(x, float), np.asarray(y, float)
    if kind == "none":
        w = np.ones(len(x))
    elif kind == "1/y^2":
        w = 1 / y ** 2
    elif kind == "1/y":
        w = 1 / np.abs(y)
    elif kind == "1/x":
        w = 1 / x
    else:
        raise ValueError(kind)
    return w * len(w) / w.sum()


CASES = [
    # name, model, f, jac, x, y, weighting, p0, bounds, unknowns
    ("4pl_rising_1y2", "4pl", f4, j4, ELISA_X, ELISA_Y, "1/y^2",
     [0.05, 1.0, 10.0, 3.0], ([-np.inf, 1e-6, 1e-6, -np.inf], [np.inf, 1e3, 1e8, np.inf]),
     [[0.3], [1.0, 1.05], [2.3]]),
    ("4pl_falling_1y", "4pl", f4, j4, COMP_X, COMP_Y, "1/y",
     [2.0, 1.0, 3.0, 0.1], ([-np.inf, 1e-6, 1e-6, -np.inf], [np.inf, 1e3, 1e8, np.inf]),
     [[1.7], [0.8, 0.82], [0.15]]),
    ("5pl_rising_1y2", "5pl", f5, j5, ELISA_X, ELISA_Y, "1/y^2",
     [0.05, 1.0, 10.0, 3.0, 1.0], ([-np.inf, 1e-6, 1e-6, -np.inf, 1e-3], [np.inf, 1e3, 1e8, np.inf, 1e3]),
     [[0.3], [1.0, 1.05], [2.3]]),
    ("power_1y2", "power", fpow, jpow, POW_X, POW_Y, "1/y^2",
     [1.0, 1.0], ([-np.inf, 1e-6], [np.inf, 1e3]),
     [[4.0], [30.0, 31.0]]),
    ("exp_offset_none", "exp_saturation_offset", fexpo, jexpo, EXP_X, EXP_Y, "none",
     [10.0, 0.1, 0.0], ([-np.inf, 1e-9, -np.inf], [np.inf, 1e9, np.inf]),
     [[2.5], [7.0, 7.1], [10.1]]),
    ("exp_nooffset_1y", "exp_saturation", fexp, jexp, EXP_X[2:], EXP_Y[2:], "1/y",
     [10.0, 0.1], ([-np.inf, 1e-9], [np.inf, 1e9]),
     [[2.5], [7.0, 7.1]]),
]


def fd_grad(fun, v, h=1e-6):
    v = np.asarray(v, float)
    g = np.zeros(len(v))
    for j in range(len(v)):
        dv = h * max(abs(v[j]), 1e-3)
        up, dn = v.copy(), v.copy()
        up[j] += dv
        dn[j] -= dv
        g[j] = (fun(up) - fun(dn)) / (2 * dv)
    return g


def main():
    out = {"scipy_version": scipy.__version__, "numpy_version": np.__version__, "cases": []}
    for name, model, f, jac, x, y, wk, p0, bnds, unknowns in CASES:
        x, y = np.asarray(x, float), np.asarray(y, float)
        w = weights(wk, x, y)
        popt, pcov = so.curve_fit(f, x, y, p0=p0, sigma=1 / np.sqrt(w), absolute_sigma=False,
                                  jac=jac, bounds=bnds, method="trf",
                                  ftol=1e-15, xtol=1e-15, gtol=1e-15, max_nfev=100000)
        r = y - f(x, *popt)
        n, p = len(x), len(popt)
        s2 = float(np.sum(w * r * r) / (n - p))
        preds = []
        lo, hi = x.min(), x.max()
        for readings in unknowns:
            ybar = float(np.mean(readings))
            m = len(readings)
            x0 = so.brentq(lambda t: f(np.array([t]), *popt)[0] - ybar, max(lo, 1e-9) / 10, hi * 10, xtol=1e-15, rtol=1e-15)
            g = fd_grad(lambda b: f(np.array([x0]), *b)[0], popt)
            slope = fd_grad(lambda t: f(np.array([t[0]]), *popt)[0], [x0])[0]
            se = float(np.sqrt(s2 / m + g @ pcov @ g) / abs(slope))  # w0 = 1 on the Σw = n scale
            tq = scipy.stats.t.ppf(0.975, n - p)
            preds.append({"readings": readings, "x_hat": x0, "se": se,
                          "low": x0 - tq * se, "high": x0 + tq * se})
        out["cases"].append({
            "name": name, "model": model, "weighting": wk,
            "x": x.tolist(), "y": y.tolist(), "weights": w.tolist(),
            "params": popt.tolist(), "cov": pcov.tolist(),
            "residual_sd": float(np.sqrt(s2)), "df": n - p, "ssr": float(np.sum(w * r * r)),
            "predictions": preds,
        })
    print(json.dumps(out, indent=1))


if __name__ == "__main__":
    main()
