package calib

import "math"

// Slope returns b1, the coefficient of x: the slope of a straight line, the
// slope at x = 0 of a quadratic (y = b0 + b1·x + b2·x²), b of a line through
// the origin. ok is false when r holds no fit of a known model.
func (r *Report) Slope() (b1 float64, ok bool) {
	c := r.Coefficients
	switch {
	case originLine(r.Model) && len(c) == 1:
		return c[0], true
	case (r.Model == Linear && len(c) == 2) || (r.Model == Quadratic && len(c) == 3):
		return c[1], true
	}
	return 0, false
}

// Intercept returns b0; ok is false for a line through the origin, which
// has none, and when r holds no fit of a known model.
func (r *Report) Intercept() (b0 float64, ok bool) {
	c := r.Coefficients
	if (r.Model == Linear && len(c) == 2) || (r.Model == Quadratic && len(c) == 3) {
		return c[0], true
	}
	return 0, false
}

// NumParams returns p, the number of coefficients of the least-squares model
// m (b0, b1 for linear; b1 for linear_origin; b0, b1, b2 for quadratic), or 0
// for any other model.
func NumParams(m Model) int {
	switch m {
	case Linear:
		return 2
	case LinearOrigin, AverageRF:
		return 1
	case Quadratic:
		return 3
	}
	return 0
}

// Terms returns what multiplies each coefficient of the least-squares model
// m in its equation, in the order of Report.Coefficients: "" for b0, "·x"
// for b1, "·x²" for b2; nil for any other model.
func Terms(m Model) []string {
	switch m {
	case Linear:
		return []string{"", "·x"}
	case LinearOrigin, AverageRF:
		return []string{"·x"}
	case Quadratic:
		return []string{"", "·x", "·x²"}
	}
	return nil
}

// fitted reports whether r holds the coefficients of a least-squares model.
func (r *Report) fitted() bool {
	p := NumParams(r.Model)
	return p > 0 && len(r.Coefficients) == p
}

// Fitted returns ŷ(x) = f(x)ᵀβ, with f(x) = (1, x), (x) or (1, x, x²); ok is
// false when r holds no fit of a least-squares model.
func (r *Report) Fitted(x float64) (y float64, ok bool) {
	if c := curveOf(r.Model); c != nil {
		if len(r.Coefficients) != c.NumParams() {
			return 0, false
		}
		y = c.Eval(x, r.Coefficients, nil)
		return y, Finite(y)
	}
	if !r.fitted() {
		return 0, false
	}
	var f [3]float64
	basis(r.Model, x, f[:])
	for i, b := range r.Coefficients {
		y += f[i] * b
	}
	return y, true
}

// MeanBand returns the half-width of the pointwise confidence band of the
// fitted mean at x, h(x) = t(1−α/2; df)·√(f(x)ᵀ·Cov·f(x)) at the report's
// two-sided confidence 1−α (Draper & Smith, Applied Regression Analysis,
// 3rd ed., §5.2, from memory). ok is false when r holds no fit, no usable
// p×p covariance, no degrees of freedom or a confidence outside (0, 1).
func (r *Report) MeanBand(x float64) (h float64, ok bool) {
	if c := curveOf(r.Model); c != nil {
		return r.curveMeanBand(c, x)
	}
	p := NumParams(r.Model)
	if !r.fitted() || len(r.Covariance) != p {
		return 0, false
	}
	for _, row := range r.Covariance {
		if len(row) != p || !Finite(row...) {
			return 0, false
		}
	}
	t, err := tQuantile(r.Confidence, r.DF)
	if err != nil {
		return 0, false
	}
	h = t * math.Sqrt(meanVariance(r.Model, r.Covariance, x))
	return h, Finite(h)
}

// tQuantile returns t(1−α/2; df) for the two-sided confidence level
// conf = 1−α.
//
// Preconditions: 0 < conf < 1, df ≥ 1.
func tQuantile(conf float64, df int) (float64, error) {
	if !(conf > 0 && conf < 1) {
		return 0, inputErr("confidence", "%v is not in (0, 1)", conf)
	}
	if df < 1 {
		return 0, inputErr("df", "%d degrees of freedom give no interval", df)
	}
	return studentT(1-(1-conf)/2, df), nil
}

// meanVariance returns var(ŷ(x)) = f(x)ᵀ·Cov·f(x), clamped at 0 against
// rounding. Precondition: cov is p×p for the model m.
func meanVariance(m Model, cov [][]float64, x float64) float64 {
	var f [3]float64
	basis(m, x, f[:])
	var v float64
	for i := range NumParams(m) {
		for j := range NumParams(m) {
			v += f[i] * cov[i][j] * f[j]
		}
	}
	return max(v, 0)
}
