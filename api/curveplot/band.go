package curveplot

import (
	"fmt"

	"curvekeeper/calib"
)

// curve is a fitted model that can be evaluated: ŷ(x) = f(x)ᵀβ and the
// pointwise confidence band of the fitted mean.
type curve struct {
	model calib.Model
	coef  []float64
	r     *calib.Report
	band  bool // false when the band cannot be drawn
}

// newCurve validates the coefficients and covariance of r. It returns
// ok == false (and no error) when r carries no usable coefficients, the case
// of a curve that could not be fitted; an error when r is inconsistent
// (coefficients that do not match the model). The band is left out (cov nil)
// when the covariance, the degrees of freedom or the confidence level cannot
// give one.
func newCurve(r *calib.Report) (c curve, ok bool, err error) {
	p := calib.NumParams(r.Model)
	if calib.IsCurveModel(r.Model) {
		p = len(calib.ParameterNames(r.Model))
	}
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
	c = curve{model: r.Model, coef: r.Coefficients, r: r}
	_, c.band = r.MeanBand(r.Range.Low)
	return c, true, nil
}

// at returns ŷ(x) = f(x)ᵀβ.
func (c curve) at(x float64) float64 {
	y, _ := c.r.Fitted(x)
	return y
}

// halfWidth returns the half-width of the pointwise confidence band of the
// fitted mean at x, t(1−α/2; df)·√(f(x)ᵀ·Cov·f(x)), and false when the
// curve has no band.
func (c curve) halfWidth(x float64) (float64, bool) {
	if !c.band {
		return 0, false
	}
	return c.r.MeanBand(x)
}
