package calib

import (
	"math"
	"strconv"
)

// invertCurve returns x with f(x) = y for the model's coefficients, and the
// sensitivity E = f'(x).
//
// Linear: x = (y − b0)/b1; origin: x = y/b1. Quadratic (ISO 8466-2):
// x = −b1/(2b2) ± √[b1²/(4b2²) − (b0 − y)/b2], taking the root on the
// monotone branch of the parabola that holds the middle of the calibrated
// range [lo, hi] (E has the sign of f' at (lo+hi)/2, so E = ±√D with
// D = b1² − 4b2(b0 − y)), computed in the cancellation-free form. ok is
// false when that branch has no root (D < 0) or b1 = 0 for a line.
func invertCurve(m Model, c []float64, lo, hi, y float64) (x, sens float64, ok bool) {
	switch m {
	case LinearOrigin, AverageRF:
		if c[0] == 0 {
			return 0, 0, false
		}
		x = y / c[0]
		return x, c[0], !math.IsInf(x, 0) && !math.IsNaN(x)
	case Quadratic:
		b0, b1, b2 := c[0], c[1], c[2]
		if b2 == 0 {
			if b1 == 0 {
				return 0, 0, false
			}
			x = (y - b0) / b1
			return x, b1, !math.IsInf(x, 0) && !math.IsNaN(x)
		}
		xm := (lo + hi) / 2
		up := b1+2*b2*xm >= 0
		disc := b1*b1 - 4*b2*(b0-y)
		if !(disc >= 0) || math.IsInf(disc, 0) {
			return 0, 0, false
		}
		sq := math.Sqrt(disc)
		if up {
			if b1 >= 0 && b1+sq != 0 {
				x = 2 * (y - b0) / (b1 + sq)
			} else {
				x = (-b1 + sq) / (2 * b2)
			}
			sens = sq
		} else {
			if b1 <= 0 && b1-sq != 0 {
				x = 2 * (y - b0) / (b1 - sq)
			} else {
				x = (-b1 - sq) / (2 * b2)
			}
			sens = -sq
		}
		return x, sens, !math.IsInf(x, 0) && !math.IsNaN(x)
	default:
		if c[1] == 0 {
			return 0, 0, false
		}
		x = (y - c[0]) / c[1]
		return x, c[1], !math.IsInf(x, 0) && !math.IsNaN(x)
	}
}

// Predict estimates the concentration of an unknown from the mean ȳ0 of its
// m readings, x̂0 = f⁻¹(ȳ0), multiplied by the dilution factor.
//
// Standard error (Miller & Miller eq. 5.9.1 / 5.10.5 form, w0 on the Σw = n
// scale): s(x0) = (s/|b1|)·√[1/(m·w0) + 1/Σw + (ȳ0 − ȳw)²/(b1²·Sxx,w)]; for
// the origin model s(x0) = (s/|b1|)·√[1/(m·w0) + x̂0²/Σwx²]; for the
// quadratic s(x0) = √[s²/(m·w0) + vᵀCov(β)v]/|E|, v = (1, x̂0, x̂0²),
// E = b1 + 2·b2·x̂0. w0 is the weight of a reading of the unknown: x-based
// schemes at x̂0, y-based at ȳ0, 1/s² from the variance model at x̂0.
//
// Interval: Fieller's exact form (Fieller 1954, JRSS B 16:175), with
// g = t²s²/(b1²·Sxx,w), t = t(1−α/2; df): x̄w + (x̂0 − x̄w)/(1−g) ±
// [t·s/(|b1|(1−g))]·√[(1−g)(1/(m·w0) + 1/Σw) + (x̂0 − x̄w)²/Sxx,w]; the origin
// model uses x̄w = 0, Sxx,w = Σwx² and no 1/Σw term. If g ≥ 1 the slope is not
// significant and the interval is unbounded (Bounded = false,
// FlagUnbounded), never two numbers. For the quadratic the interval is the
// set of x on the calibrated branch whose prediction band for the mean of m
// readings, f(x) ± t·√[s²/(m·w0) + vᵀCov(β)v], contains ȳ0 (the band
// inverted numerically, w0 held at its value at x̂0); if the band does not
// close before the vertex of the parabola (or within a thousand working
// ranges) the interval is unbounded. Both forms equal the inverted band.
//
// A quadratic whose response ȳ0 is reached at two concentrations in the
// working range (its vertex lies inside it) releases neither: the prediction
// carries FlagAmbiguous (with FlagUnbounded), no concentration, and Method
// names both roots.
//
// Preconditions: responses non-empty and finite; dilution ≥ 0 (0 means 1);
// confidence in [0, 1) (0 means r.Confidence). Otherwise a *InputError.
// Range and limit flags compare the undiluted x̂0 with the working range and
// the ICH Q2 LOD/LOQ; the dilution is applied after inversion to the
// concentration, its SE and its interval. Predict reads only exported
// fields, so a stored and reloaded Report predicts the same.
func (r *Report) Predict(responses []float64, dilution float64, confidence float64) (Prediction, error) {
	if err := r.predictable(); err != nil {
		return Prediction{}, err
	}
	if len(responses) == 0 {
		return Prediction{}, inputErr("responses", "no readings of the unknown")
	}
	var sum float64
	for i, y := range responses {
		if math.IsNaN(y) || math.IsInf(y, 0) {
			return Prediction{}, inputErr("responses["+strconv.Itoa(i)+"]", "reading is not a finite number")
		}
		sum += y
	}
	if math.IsNaN(dilution) || math.IsInf(dilution, 0) || dilution < 0 {
		return Prediction{}, inputErr("dilution", "dilution factor must be a finite number ≥ 0 (0 means 1), got %v", dilution)
	}
	if dilution == 0 {
		dilution = 1
	}
	if confidence == 0 {
		confidence = r.Confidence
	}
	if !(confidence > 0 && confidence < 1) {
		return Prediction{}, inputErr("confidence", "must lie in (0, 1), got %v", confidence)
	}
	m := len(responses)
	y0 := sum / float64(m)
	if math.IsInf(y0, 0) {
		return Prediction{}, inputErr("responses", "readings are outside the numerically usable range")
	}
	pr := Prediction{Readings: m, MeanResponse: y0, Dilution: dilution, Cautions: Cautions(),
		Interval: Interval{Level: confidence}}
	if r.Curve != nil {
		if err := r.predictCurve(y0, m, confidence, &pr); err != nil {
			return Prediction{}, err
		}
		if !Finite(pr.Concentration, pr.StandardError, pr.Interval.Low, pr.Interval.High) {
			// x̂0 is finite but its diluted value is not: as for the lines.
			return Prediction{}, inputErr("responses", "the result is outside the numerically usable range")
		}
		return pr, nil
	}
	if x1, x2, amb := r.rootsInRange(y0); amb {
		// A curve that is not monotonic over its range gives this response
		// at two concentrations: neither is released (see monotonicCheck).
		pr.Flags = append(pr.Flags, FlagAmbiguous, FlagUnbounded)
		pr.Method = "none: the response is reached at two concentrations in the working range, x = " +
			fmtG(x1) + " and x = " + fmtG(x2) + " (the curve is not monotonic there), so no concentration is reported"
		return pr, nil
	}
	t := studentT(1-(1-confidence)/2, r.DF)
	var x0 float64
	ok := false
	switch {
	case r.Model == AverageRF && r.RF != nil:
		x0, ok = r.predictRF(y0, m, t, &pr)
	case r.Model == Quadratic:
		x0, ok = r.predictQuadratic(y0, m, t, &pr)
	default:
		x0, ok = r.predictLine(y0, m, t, &pr)
	}
	if !ok {
		pr.Flags = append(pr.Flags, FlagNoRoot, FlagUnbounded)
		pr.Method = "none: the curve has no root for this response on its calibrated branch"
		return pr, nil
	}
	if x0 < r.Range.Low {
		pr.Flags = append(pr.Flags, FlagBelowRange, FlagExtrapolated)
	}
	if x0 > r.Range.High {
		pr.Flags = append(pr.Flags, FlagAboveRange, FlagExtrapolated)
	}
	if r.Limits.Computed && x0 < r.Limits.LOD {
		pr.Flags = append(pr.Flags, FlagBelowLOD)
	}
	if r.Limits.Computed && x0 < r.Limits.LOQ {
		pr.Flags = append(pr.Flags, FlagBelowLOQ)
	}
	if x0 < 0 {
		pr.Flags = append(pr.Flags, FlagNegative)
	}
	if !pr.Interval.Bounded {
		pr.Flags = append(pr.Flags, FlagUnbounded)
		pr.Interval.Low, pr.Interval.High = 0, 0
	}
	pr.Concentration = x0 * dilution
	pr.StandardError *= dilution
	pr.Interval.Low *= dilution
	pr.Interval.High *= dilution
	for _, v := range []float64{pr.Concentration, pr.StandardError, pr.Interval.Low, pr.Interval.High} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return Prediction{}, inputErr("responses", "the result is outside the numerically usable range")
		}
	}
	return pr, nil
}

// predictLine inverts the line (with or without intercept) and sets the SE
// and the Fieller interval on pr. It returns the undiluted x̂0.
func (r *Report) predictLine(y0 float64, m int, t float64, pr *Prediction) (float64, bool) {
	x0, b1, ok := invertCurve(r.Model, r.Coefficients, r.Range.Low, r.Range.High, y0)
	if !ok {
		return 0, false
	}
	s := r.ResidualSD
	w0 := r.unknownWeight(x0, y0)
	ab := math.Abs(b1)
	var xbar, sxx, inv float64 // x̄w, Sxx,w and the 1/Σw term
	if originLine(r.Model) {
		xbar, sxx, inv = 0, r.SumWX2, 0
		pr.Method = "fieller_origin"
	} else {
		xbar, sxx, inv = r.MeanXW, r.SxxW, 1/r.SumW
		pr.Method = "fieller"
	}
	dx := x0 - xbar
	pr.StandardError = s / ab * math.Sqrt(1/(float64(m)*w0)+inv+dx*dx/sxx)
	g := t * t * s * s / (b1 * b1 * sxx)
	if g < 1 {
		c := xbar + dx/(1-g)
		h := t * s / (ab * (1 - g)) * math.Sqrt((1-g)*(1/(float64(m)*w0)+inv)+dx*dx/sxx)
		pr.Interval.Low, pr.Interval.High, pr.Interval.Bounded = c-h, c+h, true
	}
	return x0, true
}

// predictQuadratic inverts the quadratic on its calibrated branch, sets the
// delta-method SE and the interval from the inverted prediction band.
func (r *Report) predictQuadratic(y0 float64, m int, t float64, pr *Prediction) (float64, bool) {
	x0, e, ok := invertCurve(Quadratic, r.Coefficients, r.Range.Low, r.Range.High, y0)
	if !ok {
		return 0, false
	}
	s := r.ResidualSD
	w0 := r.unknownWeight(x0, y0)
	obs := s * s / (float64(m) * w0)
	// bandVar(x) = s²/(m·w0) + vᵀCov(β)v, v = (1, x, x²).
	bandVar := func(x float64) float64 {
		v := [3]float64{1, x, x * x}
		q := obs
		for j := 0; j < 3; j++ {
			for k := 0; k < 3; k++ {
				q += v[j] * r.Covariance[j][k] * v[k]
			}
		}
		return q
	}
	v0 := bandVar(x0)
	pr.Method = "band_inversion"
	if e == 0 {
		// At the vertex the sensitivity vanishes: no finite SE or interval.
		return x0, true
	}
	pr.StandardError = math.Sqrt(max(v0, 0)) / math.Abs(e)
	if v0 <= 0 {
		pr.Interval.Low, pr.Interval.High, pr.Interval.Bounded = x0, x0, true
		return x0, true
	}
	b0, b1, b2 := r.Coefficients[0], r.Coefficients[1], r.Coefficients[2]
	// h(x) ≤ 0 ⇔ ȳ0 lies inside the band at x; h(x0) < 0.
	h := func(x float64) float64 {
		d := y0 - (b0 + b1*x + b2*x*x)
		return d*d - t*t*bandVar(x)
	}
	span := max(r.Range.High-r.Range.Low, math.Abs(x0))
	if !(span > 0) {
		span = 1
	}
	xv := math.Inf(1)
	if b2 != 0 {
		xv = -b1 / (2 * b2)
	}
	var ends [2]float64
	for side, dir := range [2]float64{-1, 1} {
		limit := x0 + dir*1e3*span
		if (xv-x0)*dir > 0 && !math.IsInf(xv, 0) {
			limit = xv // do not cross to the other branch
		}
		end, closed := bandEdge(h, x0, limit, span/64)
		if !closed {
			return x0, true // Bounded stays false
		}
		ends[side] = end
	}
	pr.Interval.Low, pr.Interval.High, pr.Interval.Bounded = ends[0], ends[1], true
	return x0, true
}

// bandEdge finds the point between x0 (h < 0) and limit where h turns
// positive: it steps out from x0 with doubling steps from step, then
// bisects. closed is false when h stays ≤ 0 up to limit.
func bandEdge(h func(float64) float64, x0, limit, step float64) (float64, bool) {
	dir := 1.0
	if limit < x0 {
		dir = -1
	}
	in, out := x0, limit
	found := false
	for d := step; d < math.Abs(limit-x0); d *= 2 {
		x := x0 + dir*d
		if h(x) > 0 {
			out, found = x, true
			break
		}
		in = x
	}
	if !found {
		if !(h(limit) > 0) {
			return 0, false
		}
		out = limit
	}
	for i := 0; i < 200; i++ {
		mid := (in + out) / 2
		if mid == in || mid == out {
			break
		}
		if h(mid) > 0 {
			out = mid
		} else {
			in = mid
		}
	}
	return (in + out) / 2, true
}

// predictable checks that the exported fields Predict needs are present
// and finite.
func (r *Report) predictable() error {
	if r == nil {
		return inputErr("report", "no report")
	}
	p := 0
	switch r.Model {
	case Linear, LinearOrigin, AverageRF, Quadratic:
		p = nParams(r.Model)
	case FourPL, FivePL, Power, ExpSaturation, ExpSaturationOffset:
		p = curveOf(r.Model).NumParams()
	default:
		return inputErr("report.model", "unknown model %q", r.Model)
	}
	if len(r.Coefficients) != p {
		return inputErr("report.coefficients", "%d coefficients for model %s (a failed run has no curve)", len(r.Coefficients), r.Model)
	}
	if r.DF < 1 {
		return inputErr("report.df", "no residual degrees of freedom")
	}
	fin := func(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
	for _, c := range r.Coefficients {
		if !fin(c) {
			return inputErr("report.coefficients", "not finite")
		}
	}
	if !fin(r.ResidualSD) || r.ResidualSD < 0 {
		return inputErr("report.residual_sd", "must be finite and ≥ 0")
	}
	if !(r.WeightScale > 0) || !fin(r.WeightScale) {
		return inputErr("report.weight_scale", "must be finite and > 0")
	}
	if r.Curve != nil {
		if !(r.Curve.ResponseFloor > 0) || !fin(r.Curve.ResponseFloor) || !fin(r.Curve.Theta) {
			return inputErr("report.curve", "a non-linear curve needs a response floor > 0 and a finite θ")
		}
		return nil
	}
	switch r.Weighting {
	case WeightNone:
	case WeightInvSqrtX, WeightInvX, WeightInvX2, WeightInvSqrtY, WeightInvY, WeightInvY2:
		if !(r.WeightFloor > 0) || !fin(r.WeightFloor) {
			return inputErr("report.weight_floor", "must be finite and > 0 for %s", r.Weighting)
		}
	case WeightInvS2:
		if !(r.Variance.Floor > 0) || !fin(r.Variance.Floor) || !fin(r.Variance.C0) || !fin(r.Variance.C1) {
			return inputErr("report.variance", "1/s^2 needs a variance model with a floor > 0")
		}
	default:
		return inputErr("report.weighting", "unknown weighting %q", r.Weighting)
	}
	switch r.Model {
	case Linear:
		if !(r.SxxW > 0) || !(r.SumW > 0) || !fin(r.SxxW) || !fin(r.SumW) || !fin(r.MeanXW) {
			return inputErr("report.sxx_w", "weighted sums must be finite and > 0")
		}
	case LinearOrigin, AverageRF:
		if !(r.SumWX2 > 0) || !fin(r.SumWX2) {
			return inputErr("report.sum_wx2", "must be finite and > 0")
		}
	case Quadratic:
		if len(r.Covariance) != 3 {
			return inputErr("report.covariance", "want a 3×3 covariance matrix")
		}
		for _, row := range r.Covariance {
			if len(row) != 3 {
				return inputErr("report.covariance", "want a 3×3 covariance matrix")
			}
			for _, v := range row {
				if !fin(v) {
					return inputErr("report.covariance", "not finite")
				}
			}
		}
	}
	if !fin(r.Range.Low) || !fin(r.Range.High) {
		return inputErr("report.range", "not finite")
	}
	if r.Model == AverageRF && (r.RF == nil || !(r.RF.Mean > 0) || !fin(r.RF.Mean) || !fin(r.RF.SD) || r.RF.K < 2) {
		return inputErr("report.rf", "the average RF model needs its response factors (mean > 0, at least two)")
	}
	return nil
}
