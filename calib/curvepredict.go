package calib

import "math"

// Predict returns the concentration x̂0 whose response on the fitted curve
// is the mean ȳ0 of responses (m readings of one unknown), multiplied by
// dilution, with an interval by the delta method:
//
//	s(x̂0)² = [s²/(m·w0) + ∇βf(x̂0)ᵀ·Cov(β)·∇βf(x̂0)] / f′(x̂0)²
//	x̂0 ± t(1 − α/2; DF)·s(x̂0),  α = 1 − confidence
//
// (first-order propagation through the implicit function f(x̂0; β) = ȳ0;
// the interval is symmetric in x, so it can reach below zero; it is not the
// inverted prediction band). w0 is the raw weight a reading of the unknown
// gets under the fit's weighting (1 when unweighted; for 1/y² pass 1/ȳ0²,
// for 1/x² the weight at the expected concentration), brought to the
// Σw = n scale with WeightScale. confidence 0 means 0.95.
//
// No concentration is reported (Concentration 0, interval unbounded, flags
// say why) when ȳ0 lies outside the curve's asymptotes (FlagAboveAsymptote,
// FlagBelowAsymptote) or has no root (FlagNoRoot). A finite x̂0 outside the
// standards' range is flagged below_range or above_range with
// extrapolated; a zero or infinite sensitivity f′(x̂0) leaves the interval
// unbounded. Preconditions (an *InputError otherwise): the fit Converged,
// at least one finite response, dilution and w0 positive and finite,
// 0 < confidence < 1.
func (f *CurveFit) Predict(responses []float64, w0, dilution, confidence float64) (Prediction, error) {
	c := curveOf(f.Model)
	if c == nil || len(f.Coefficients) != c.NumParams() {
		return Prediction{}, inputErr("curve.model", "%q is not a non-linear model with %d coefficients", f.Model, len(f.Coefficients))
	}
	if f.Outcome != Converged || f.Covariance == nil {
		return Prediction{}, inputErr("curve", "the fit did not converge (%s): no prediction", f.Outcome)
	}
	if len(responses) == 0 {
		return Prediction{}, inputErr("responses", "no response")
	}
	var sum float64
	for i, v := range responses {
		if !Finite(v) {
			return Prediction{}, inputErr("responses", "response %d is not finite", i)
		}
		sum += v
	}
	if !(dilution > 0) || math.IsInf(dilution, 0) {
		return Prediction{}, inputErr("dilution", "must be positive and finite")
	}
	if !(w0 > 0) || math.IsInf(w0, 0) {
		return Prediction{}, inputErr("w0", "must be positive and finite")
	}
	if confidence == 0 {
		confidence = 0.95
	}
	if !(confidence > 0 && confidence < 1) {
		return Prediction{}, inputErr("confidence", "must lie in (0, 1)")
	}
	m := len(responses)
	y0 := sum / float64(m)
	if !Finite(y0) {
		return Prediction{}, inputErr("responses", "their mean is not finite")
	}
	pr := Prediction{Method: "delta", Readings: m, MeanResponse: y0, Dilution: dilution,
		Interval: Interval{Level: confidence}, Cautions: Cautions()}
	beta := f.Coefficients
	x0, flag, ok := c.invert(y0, beta)
	if !ok {
		pr.Flags = append(pr.Flags, flag, FlagUnbounded)
		return pr, nil
	}
	pr.Concentration = x0 * dilution
	if !Finite(pr.Concentration) {
		// x̂0 is finite but its diluted value is not: as for the lines.
		return Prediction{}, inputErr("responses", "the result is outside the numerically usable range")
	}
	pr.Flags = f.Range.appendFlags(pr.Flags, x0)
	grad := make([]float64, len(beta))
	c.Eval(x0, beta, grad)
	v := f.ResidualSD*f.ResidualSD/(float64(m)*w0*f.WeightScale) + quadForm(f.Covariance, grad)
	sens := c.slope(x0, beta)
	se := math.Sqrt(v) / math.Abs(sens)
	if !Finite(se) || se == 0 && v > 0 {
		pr.Flags = append(pr.Flags, FlagUnbounded)
		return pr, nil
	}
	pr.StandardError = se * dilution
	if !Finite(pr.StandardError) {
		return Prediction{}, inputErr("responses", "the result is outside the numerically usable range")
	}
	t := studentT(1-(1-confidence)/2, f.DF)
	lo, hi := (x0-t*se)*dilution, (x0+t*se)*dilution
	if !Finite(lo, hi) {
		pr.Flags = append(pr.Flags, FlagUnbounded)
		return pr, nil
	}
	pr.Interval.Low, pr.Interval.High, pr.Interval.Bounded = lo, hi, true
	return pr, nil
}
