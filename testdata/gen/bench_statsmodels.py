#!/usr/bin/python3
"""Time statsmodels' bare WLS fit of the data of calib's BenchmarkFullReport.

Run from the repository root, in the same session as the Go benchmark:
    /usr/bin/python3 testdata/gen/bench_statsmodels.py
    go test ./calib -run '^$' -bench 'FullReport|SolveLSQ' -benchmem

The data are calib's photometerPoints (an invented nitrate photometer:
8 levels 0.5-100 mg/L in duplicate, y = (0.012 + 0.0481 x)(1 + noise)),
weighted 1/x^2 and normalised to sum to n. Only the fit is timed
(sm.WLS(...).fit(method="qr")): no checks, limits or prediction, so the
comparison flatters statsmodels. Prints ns/op, best of several repeats.
"""

import timeit

import numpy as np
import statsmodels
import statsmodels.api as sm

LEVELS = [0.5, 1, 2, 5, 10, 20, 50, 100]
NOISE = [0.021, -0.018, 0.012, -0.025, 0.008, -0.011, 0.017, -0.006,
         -0.014, 0.019, 0.009, -0.022, 0.013, -0.010, -0.016, 0.015]

x = np.array([lv for lv in LEVELS for _ in range(2)], dtype=float)
y = np.array([(0.012 + 0.0481 * lv) * (1 + NOISE[2 * i + r])
              for i, lv in enumerate(LEVELS) for r in range(2)])
w = 1 / x ** 2
w *= len(w) / w.sum()
X = sm.add_constant(x)


def fit():
    return sm.WLS(y, X, weights=w).fit(method="qr")


res = fit()
loops = 2000
best = min(timeit.repeat(fit, number=loops, repeat=7)) / loops
print(f"statsmodels {statsmodels.__version__} numpy {np.__version__}")
print(f"params {res.params[0]:.12g} {res.params[1]:.12g}")
print(f"BenchmarkStatsmodelsWLS {loops} loops x 7 repeats: {best * 1e9:.0f} ns/op (best)")
