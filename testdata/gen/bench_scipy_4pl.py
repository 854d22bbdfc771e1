#!/usr/bin/python3
"""Time scipy.optimize.curve_fit on the data of calib's BenchmarkFit4PL.

Run from the repository root, in the same session as the Go benchmark:
    /usr/bin/python3 testdata/gen/bench_scipy_4pl.py
    go test ./calib -run '^$' -bench Fit4PL -benchmem

The data are calib's elisaCurve (an invented immunoassay, 8 calibrators in
duplicate) with 1/y^2 weights normalised to sum to n. Two scipy variants are
timed: curve_fit(method="trf") with the analytic Jacobian and bounds like
calib's, and curve_fit(method="lm") with its default finite differences,
both from the same rough start [0.05, 1, 10, 3] and default tolerances.
Only the fit is timed (no inverse prediction), which flatters scipy.
Prints ns/op, best of several repeats.
"""

import timeit

import numpy as np
import scipy
import scipy.optimize as so

X = np.array([0.5, 0.5, 1, 1, 2.5, 2.5, 5, 5, 10, 10, 25, 25, 50, 50, 100, 100], float)
Y = np.array([0.081, 0.077, 0.118, 0.124, 0.236, 0.229, 0.432, 0.447,
              0.806, 0.781, 1.542, 1.571, 2.118, 2.071, 2.452, 2.497])
W = 1 / Y ** 2
W *= len(W) / W.sum()
SIGMA = 1 / np.sqrt(W)
P0 = [0.05, 1.0, 10.0, 3.0]
BOUNDS = ([-np.inf, 1e-6, 1e-6, -np.inf], [np.inf, 1e3, 1e8, np.inf])


def f4(x, a, b, c, d):
    return d + (a - d) / (1.0 + (x / c) ** b)


def j4(x, a, b, c, d):
    s = (x / c) ** b
    q = 1.0 + s
    k = (a - d) * q ** -2 * s
    return np.column_stack([1 / q, -k * np.log(x / c), k * b / c, 1 - 1 / q])


def fit_trf():
    return so.curve_fit(f4, X, Y, p0=P0, sigma=SIGMA, jac=j4, bounds=BOUNDS, method="trf")


def fit_lm():
    return so.curve_fit(f4, X, Y, p0=P0, sigma=SIGMA, method="lm")


print(f"scipy {scipy.__version__} numpy {np.__version__}")
for name, fn in [("trf_analytic_jac", fit_trf), ("lm_finite_diff", fit_lm)]:
    p, _ = fn()
    loops = 200
    best = min(timeit.repeat(fn, number=loops, repeat=7)) / loops
    print(f"BenchmarkScipyCurveFit4PL/{name} params {' '.join(f'{v:.10g}' for v in p)}: {best * 1e9:.0f} ns/op (best of 7x{loops})")
