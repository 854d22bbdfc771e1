#!/usr/bin/python3
"""Golden values for curvekeeper's average response factor model (calib/responsefactor.go).

Run:  /usr/bin/python3 testdata/gen/make_golden_rf.py > testdata/golden/statsmodels_rf.json
(from the repository root; Debian packages python3-statsmodels, python3-scipy, python3-numpy).

The data are invented: a GC-MS run with an internal standard at C_is = 25 ng/mL
in every calibrator and sample, seven levels read twice.

The response ratios A_x/A_is are computed here from the (analyte, IS) pairs.

1. Average relative response factor.  RRF_i = (A_x*C_is)/(A_is*C_x) is the slope
   of the line through the origin y = b*x fitted by weighted least squares with
   y = C_is*A_x/A_is, x = C_x and weights 1/x^2: then b = mean(RRF),
   scale = var(RRF) (ddof 1) and bse = sd(RRF)/sqrt(k).  statsmodels WLS
   fit(method="qr") gives b, scale and bse.
2. Unknowns.  For m readings with mean ratio r0, ybar = C_is*r0 and
   x_hat = ybar/b.  The interval is the set of x whose prediction band for the
   mean of m new readings contains ybar:
   (ybar - b*x)^2 <= t^2 * (scale/(m*w0(x)) + se_mean(x)^2), w0(x) = 1/x^2,
   se_mean from statsmodels get_prediction, t = t(0.975; k-1); roots by brentq.
   se = sqrt(scale/(m*w0(x_hat)) + se_mean(x_hat)^2)/b.
3. A straight line with intercept on the ratios, y = A_x/A_is against C_x,
   statsmodels OLS fit(method="qr"), for the same ratios fitted by calib.Fit.
"""

import json
import sys

import numpy as np
import scipy
import scipy.optimize
import scipy.stats
import statsmodels
import statsmodels.api as sm

C_IS = 25.0
CONC = [1, 1, 2, 2, 5, 5, 10, 10, 20, 20, 50, 50, 100, 100]
AREA = [2210, 2390, 4705, 4480, 11830, 11210, 23050, 24400,
        47100, 45800, 118900, 121700, 236800, 241300]
IS_AREA = [50210, 51880, 49770, 50930, 52140, 49120, 50660, 51300,
           48870, 50010, 51420, 49650, 50380, 50820]
UNKNOWNS = [  # (analyte areas, IS areas) of each sample's readings
    ([3300], [50400]),
    ([30500, 31200], [49800, 51100]),
    ([180400, 176900, 183000], [50900, 49300, 50150]),
]
CONFIDENCE = 0.95


def main():
    x = np.asarray(CONC, dtype=float)
    ratio = np.asarray(AREA, dtype=float) / np.asarray(IS_AREA, dtype=float)
    k = len(x)
    y = C_IS * ratio
    w = 1.0 / x ** 2
    res = sm.WLS(y, x.reshape(-1, 1), weights=w).fit(method="qr")
    b = float(res.params[0])
    scale = float(res.scale)
    t = float(scipy.stats.t.ppf(1 - (1 - CONFIDENCE) / 2, int(res.df_resid)))

    def se_mean(xx):
        return float(res.get_prediction(np.array([[xx]])).se_mean[0])

    preds = []
    for areas, is_areas in UNKNOWNS:
        m = len(areas)
        r0 = float(np.mean(np.asarray(areas, float) / np.asarray(is_areas, float)))
        ybar = C_IS * r0
        xhat = ybar / b

        def h(z):
            return (ybar - b * z) ** 2 - t * t * (scale * z * z / m + se_mean(z) ** 2)

        lo = scipy.optimize.brentq(h, xhat / 10, xhat, xtol=1e-15, rtol=1e-15)
        hi = scipy.optimize.brentq(h, xhat, xhat * 10, xtol=1e-15, rtol=1e-15)
        se = np.sqrt(scale * xhat * xhat / m + se_mean(xhat) ** 2) / b
        preds.append({"areas": areas, "is_areas": is_areas, "mean_ratio": r0,
                      "x_hat": xhat, "se": float(se), "low": lo, "high": hi})

    line = sm.OLS(ratio, sm.add_constant(x)).fit(method="qr")
    out = {
        "generated_by": "testdata/gen/make_golden_rf.py",
        "library": "statsmodels WLS (origin, weights 1/x^2) and OLS fit(method='qr'), get_prediction",
        "statsmodels_version": statsmodels.__version__,
        "numpy_version": np.__version__,
        "scipy_version": scipy.__version__,
        "is_conc": C_IS,
        "conc": CONC,
        "area": AREA,
        "is_area": IS_AREA,
        "ratios": ratio.tolist(),
        "mean_rrf": b,
        "sd_rrf": float(np.sqrt(scale)),
        "se_mean_rrf": float(res.bse[0]),
        "rsd_pct_numpy": float(100 * np.std(C_IS * ratio / x, ddof=1) / np.mean(C_IS * ratio / x)),
        "df": int(res.df_resid),
        "t": t,
        "confidence": CONFIDENCE,
        "predictions": preds,
        "ratio_line": {"params": line.params.tolist(), "bse": line.bse.tolist(),
                       "residual_sd": float(np.sqrt(line.scale)), "rsquared": float(line.rsquared)},
    }
    json.dump(out, sys.stdout, indent=1)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
