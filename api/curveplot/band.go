package curveplot

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"

	"curvekeeper/calib"
)

// nParams is the number of coefficients of model m, or 0 for an unknown
// model.
func nParams(m calib.Model) int {
	switch m {
	case calib.Linear:
		return 2
	case calib.LinearOrigin:
		return 1
	case calib.Quadratic:
		return 3
	}
	return 0
}

// basis returns f(x), the row of the design matrix at x, in the order of the
// model equation: (1, x) linear, (x) through the origin, (1, x, x²)
// quadratic.
func basis(m calib.Model, x float64) []float64 {
	switch m {
	case calib.LinearOrigin:
		return []float64{x}
	case calib.Quadratic:
		return []float64{1, x, x * x}
	}
	return []float64{1, x}
}

// curve is a fitted model that can be evaluated: ŷ(x) = f(x)ᵀβ and the
// pointwise confidence band of the fitted mean.
type curve struct {
	model calib.Model
	coef  []float64
	cov   [][]float64 // nil when the band cannot be drawn
	t     float64     // t(1−α/2; df), 0 without a band
}

// newCurve validates the coefficients and covariance of r. It returns
// ok == false (and no error) when r carries no usable coefficients, the case
// of a curve that could not be fitted; an error when r is inconsistent
// (coefficients that do not match the model). The band is left out (cov nil)
// when the covariance, the degrees of freedom or the confidence level cannot
// give one.
func newCurve(r *calib.Report) (c curve, ok bool, err error) {
	p := nParams(r.Model)
	if len(r.Coefficients) == 0 {
		return c, false, nil
	}
	if p == 0 {
		return c, false, &OptionError{Field: "report.model", Reason: fmt.Sprintf("unknown model %q", r.Model)}
	}
	if len(r.Coefficients) != p {
		return c, false, &OptionError{Field: "report.coefficients",
			Reason: fmt.Sprintf("model %s has %d coefficients, report has %d", r.Model, p, len(r.Coefficients))}
	}
	for _, b := range r.Coefficients {
		if !calib.Finite(b) {
			return c, false, nil
		}
	}
	c = curve{model: r.Model, coef: r.Coefficients}
	if t, err := tQuantile(r.Confidence, r.DF); err == nil && covUsable(r.Covariance, p) {
		c.cov, c.t = r.Covariance, t
	}
	return c, true, nil
}

func covUsable(cov [][]float64, p int) bool {
	if len(cov) != p {
		return false
	}
	for _, row := range cov {
		if len(row) != p {
			return false
		}
		for _, v := range row {
			if !calib.Finite(v) {
				return false
			}
		}
	}
	return true
}

// tQuantile returns t(1−α/2; df) for the two-sided confidence level
// conf = 1−α, from gonum's Student's t distribution.
//
// Preconditions: 0 < conf < 1, df ≥ 1.
func tQuantile(conf float64, df int) (float64, error) {
	if !(conf > 0 && conf < 1) {
		return 0, &OptionError{Field: "report.confidence", Reason: fmt.Sprintf("%v is not in (0, 1)", conf)}
	}
	if df < 1 {
		return 0, &OptionError{Field: "report.df", Reason: fmt.Sprintf("%d degrees of freedom give no interval", df)}
	}
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(df)}.Quantile(1 - (1-conf)/2), nil
}

// at returns ŷ(x) = f(x)ᵀβ.
func (c curve) at(x float64) float64 {
	var y float64
	for i, f := range basis(c.model, x) {
		y += f * c.coef[i]
	}
	return y
}

// meanVariance returns var(ŷ(x)) = f(x)ᵀ·Cov·f(x), clamped at 0 against
// rounding. Precondition: cov is p×p for the model.
func meanVariance(m calib.Model, cov [][]float64, x float64) float64 {
	f := basis(m, x)
	var v float64
	for i := range f {
		for j := range f {
			v += f[i] * cov[i][j] * f[j]
		}
	}
	return max(v, 0)
}

// halfWidth returns the half-width of the pointwise confidence band of the
// fitted mean at x, t(1−α/2; df)·√(f(x)ᵀ·Cov·f(x)), and false when the
// curve has no band.
func (c curve) halfWidth(x float64) (float64, bool) {
	if c.cov == nil {
		return 0, false
	}
	h := c.t * math.Sqrt(meanVariance(c.model, c.cov, x))
	return h, calib.Finite(h)
}
