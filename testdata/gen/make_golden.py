#!/usr/bin/python3
"""Golden values for curvekeeper's calib package from statsmodels WLS.

Run:  /usr/bin/python3 testdata/gen/make_golden.py > testdata/golden/statsmodels_wls.json
(from the repository root; Debian package python3-statsmodels, scipy, numpy).

The data are invented: a nitrate photometer (linear, with a blank level in
one case) and a slightly saturating detector (quadratic). Weights follow the
rule documented in calib/weights.go: the raw weight of a reading is
(f / max(|v|, f))^k with v = x (1/x, 1/x^2) or y (1/y, 1/y^2), f the smallest
non-zero |v| among the standards (so a zero gets the floor's weight), then
normalised to sum to n. statsmodels fits with method="qr".

For inverse prediction the interval is obtained by inverting statsmodels'
prediction band for the MEAN of m new readings: the set of x with
(ybar0 - mean(x))^2 <= t^2 * (scale/(m*w0) + se_mean(x)^2), t = t(0.975; df),
w0 the weight of a reading of the unknown on the same scale, held fixed at
its value at x_hat (x-based schemes) or ybar0 (y-based).  The roots are found
with scipy.optimize.brentq.  The approximate SE is
sqrt(scale/(m*w0) + se_mean(x_hat)^2) / |f'(x_hat)|.
"""

import json
import sys

import numpy as np
import scipy
import scipy.optimize
import scipy.stats
import statsmodels
import statsmodels.api as sm

PHOTOMETER_X = [0.5, 0.5, 1, 1, 2, 2, 5, 5, 10, 10, 20, 20, 50, 50, 100, 100]
PHOTOMETER_Y = [0.036807, 0.035401, 0.060821, 0.058597, 0.10907, 0.10701,
                0.25679, 0.25099, 0.4861, 0.50237, 0.98277, 0.95257,
                2.4484, 2.3928, 4.7448, 4.8943]
# The same photometer run with a blank level (zero concentration) regressed.
BLANK_X = [0, 0] + PHOTOMETER_X
BLANK_Y = [0.0131, 0.0109] + PHOTOMETER_Y
CURVED_X = [1, 1, 5, 5, 10, 10, 20, 20, 40, 40, 60, 60, 80, 80]
CURVED_Y = [1.276, 1.226, 5.9, 5.99, 11.73, 11.59, 22.35, 22.57, 41.8, 41.45,
            57.47, 57.9, 70.65, 70.23]

CASES = [
    # name, model, weighting, x, y, unknowns (lists of readings)
    ("linear_1x_blank", "linear", "1/x", BLANK_X, BLANK_Y,
     [[0.02], [0.3, 0.31], [2.0, 2.05, 1.98], [4.9]]),
    ("linear_1x2", "linear", "1/x^2", PHOTOMETER_X, PHOTOMETER_Y,
     [[0.04], [0.3, 0.31], [2.0, 2.05, 1.98], [4.9]]),
    ("linear_1y2", "linear", "1/y^2", PHOTOMETER_X, PHOTOMETER_Y,
     [[0.04], [0.3, 0.31], [2.0, 2.05, 1.98], [4.9]]),
    ("quadratic_none", "quadratic", "none", CURVED_X, CURVED_Y,
     [[2.0], [15.0, 15.2], [45.0], [69.0, 69.5]]),
    ("quadratic_1x", "quadratic", "1/x", CURVED_X, CURVED_Y,
     [[2.0], [15.0, 15.2], [45.0], [69.0, 69.5]]),
]

CONFIDENCE = 0.95


def raw_weight(scheme, floor, x, y):
    if scheme == "none":
        return 1.0
    v = abs(x) if scheme in ("1/x", "1/x^2") else abs(y)
    k = 2 if scheme.endswith("^2") else 1
    return (floor / max(v, floor)) ** k


def design(model, x):
    x = np.asarray(x, dtype=float)
    if model == "linear":
        return np.column_stack([np.ones_like(x), x])
    return np.column_stack([np.ones_like(x), x, x * x])


def case(name, model, scheme, xs, ys, unknowns):
    x = np.asarray(xs, dtype=float)
    y = np.asarray(ys, dtype=float)
    n = len(x)
    if scheme in ("1/x", "1/x^2"):
        floor = float(np.min(np.abs(x[x != 0])))
    elif scheme in ("1/y", "1/y^2"):
        floor = float(np.min(np.abs(y[y != 0])))
    else:
        floor = 1.0
    raw = np.array([raw_weight(scheme, floor, a, b) for a, b in zip(x, y)])
    scale_k = n / raw.sum()
    w = raw * scale_k
    res = sm.WLS(y, design(model, x), weights=w).fit(method="qr")
    # statsmodels 0.13 has no influence measures for WLS (OLSInfluence would
    # mix weighted and unweighted quantities), so they come from the OLS fit
    # of the whitened problem sqrt(W)*y on sqrt(W)*X, which is the same
    # least-squares problem: its hat diagonal is the weighted leverage.
    white = sm.OLS(res.model.wendog, res.model.wexog).fit()  # pinv: influence needs pinv_wexog
    infl = white.get_influence()
    df = int(res.df_resid)
    t = float(scipy.stats.t.ppf(1 - (1 - CONFIDENCE) / 2, df))
    beta = res.params
    lo_x, hi_x = float(x.min()), float(x.max())

    def f(xx):
        return float(design(model, [xx])[0] @ beta)

    def fprime(xx):
        return float(beta[1] + (2 * beta[2] * xx if model == "quadratic" else 0))

    def band(xx):
        p = res.get_prediction(design(model, [xx]))
        return float(p.predicted_mean[0]), float(p.se_mean[0])

    preds = []
    for readings in unknowns:
        m = len(readings)
        ybar = float(np.mean(readings))
        if model == "linear":
            xhat = (ybar - beta[0]) / beta[1]
        else:
            xhat = scipy.optimize.brentq(lambda z: f(z) - ybar, lo_x, hi_x, xtol=1e-15, rtol=1e-15)
        w0 = scale_k * raw_weight(scheme, floor, xhat, ybar)
        obs = res.scale / (m * w0)

        def h(z):
            mean, se = band(z)
            return (ybar - mean) ** 2 - t * t * (obs + se * se)

        span = hi_x - lo_x
        ends = []
        for direction in (-1.0, 1.0):
            step = span / 64
            inner = xhat
            while True:
                outer = xhat + direction * step
                if h(outer) > 0:
                    break
                inner = outer
                step *= 2
                if step > 1e3 * span:
                    raise SystemExit(f"{name}: band does not close for {readings}")
            ends.append(scipy.optimize.brentq(h, inner, outer, xtol=1e-15, rtol=1e-15))
        _, se_mean = band(xhat)
        se = np.sqrt(obs + se_mean ** 2) / abs(fprime(xhat))
        preds.append({
            "readings": readings,
            "x_hat": float(xhat),
            "w0": float(w0),
            "t": t,
            "se": float(se),
            "low": float(min(ends)),
            "high": float(max(ends)),
        })
    return {
        "name": name,
        "model": model,
        "weighting": scheme,
        "x": xs,
        "y": ys,
        "weights": w.tolist(),
        "params": res.params.tolist(),
        "bse": res.bse.tolist(),
        "cov": res.cov_params().tolist(),
        "residual_sd": float(np.sqrt(res.scale)),
        "df": df,
        "rsquared": float(res.rsquared),
        "leverage": infl.hat_matrix_diag.tolist(),
        "studentized": infl.resid_studentized_internal.tolist(),
        "cooks": infl.cooks_distance[0].tolist(),
        "confidence": CONFIDENCE,
        "predictions": preds,
    }


def main():
    out = {
        "generated_by": "testdata/gen/make_golden.py",
        "library": "statsmodels WLS fit(method='qr') and get_prediction; influence from OLS of the whitened problem",
        "statsmodels_version": statsmodels.__version__,
        "numpy_version": np.__version__,
        "scipy_version": scipy.__version__,
        "cases": [case(*c) for c in CASES],
    }
    json.dump(out, sys.stdout, indent=1)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
