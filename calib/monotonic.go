package calib

import "math"

// workingRange returns the working range of the fitted levels (sorted by
// x): from the lowest to the highest non-zero standard. A blank or zero
// standard in the fit anchors the curve but bounds no quantitative result
// (TNI 2016 V1M4 §1.7.1.1: no quantitative result below the lowest or above
// the highest remaining standard; ICH M10: the lowest non-zero standard is
// the LLOQ), so the below-range flag, the LLOQ of the back-calculation check
// and the homoscedasticity test all start at the same level.
func workingRange(levels []level) Range {
	lo := levels[0].x
	if lo == 0 && len(levels) > 1 {
		lo = levels[1].x // levels are distinct and x ≥ 0: only the first can be 0
	}
	return Range{Low: lo, High: levels[len(levels)-1].x}
}

// slopeAt returns the sensitivity f'(x) of the model's curve.
func slopeAt(m Model, c []float64, x float64) float64 {
	switch m {
	case LinearOrigin, AverageRF:
		return c[0]
	case Quadratic:
		return c[1] + 2*c[2]*x
	}
	return c[1]
}

// monotonicCheck: the fitted curve must be strictly monotonic over the
// working range [lo, hi], so that every response maps to one concentration.
// For the line the slope must be non-zero; for the quadratic the
// sensitivity f'(x) = b1 + 2·b2·x must not change sign inside the range (its
// vertex −b1/(2b2) outside (lo, hi)). Statistic is the smaller of σ·f'(lo)
// and σ·f'(hi), σ the direction of the curve: negative when the sensitivity
// changes sign. A sensitivity within rounding (roundingTol) of zero at an
// end counts as zero. Common practice: ISO 8466-2 inverts the quadratic on
// one branch, which presumes it (recalled from memory).
func monotonicCheck(r *Report, t *text) Check {
	lo, hi := r.Range.Low, r.Range.High
	dlo, dhi := slopeAt(r.Model, r.Coefficients, lo), slopeAt(r.Model, r.Coefficients, hi)
	sg := 1.0
	if dlo+dhi < 0 {
		sg = -1
	}
	big := max(math.Abs(dlo), math.Abs(dhi))
	tol := roundingTol * big
	stat := min(sg*dlo, sg*dhi)
	c := Check{Name: CheckMonotonic, Statistic: stat, Computed: true, Passed: big > 0 && stat >= -tol}
	if r.Model != Quadratic {
		t.s("Slope ").g(dlo)
		if c.Passed {
			t.s(" ≠ 0: the line is strictly monotonic over the working range.")
		} else {
			t.s(": the line is flat, so a response does not determine a concentration.")
		}
		return c
	}
	t.s("Sensitivity f'(x) = b1 + 2·b2·x is ").g(dlo).s(" at the lowest (x = ").g(lo).
		s(") and ").g(dhi).s(" at the highest non-zero standard (x = ").g(hi).s(")")
	if c.Passed {
		t.s(": the quadratic is strictly monotonic over the working range.")
		return c
	}
	if b2 := r.Coefficients[2]; b2 != 0 {
		t.s(": the vertex of the parabola at x = ").g(-r.Coefficients[1] / (2 * b2)).
			s(" lies inside the working range, so responses near it map to two concentrations and standards beyond it read back on the wrong branch; narrow the range or use another model.")
	} else {
		t.s(": the curve is flat, so a response does not determine a concentration.")
	}
	return c
}

// rootsInRange returns both roots of the quadratic f(x) = y0 when both lie
// in the working range and differ: the response is then ambiguous, as the
// curve is not monotonic there. ok is false otherwise (and always for the
// linear models).
func (r *Report) rootsInRange(y0 float64) (x1, x2 float64, ok bool) {
	if r.Model != Quadratic {
		return 0, 0, false
	}
	b0, b1, b2 := r.Coefficients[0], r.Coefficients[1], r.Coefficients[2]
	if b2 == 0 {
		return 0, 0, false
	}
	disc := b1*b1 - 4*b2*(b0-y0)
	if !(disc > 0) || math.IsInf(disc, 0) {
		return 0, 0, false
	}
	sq := math.Sqrt(disc)
	// The cancellation-free pair: q = −(b1 + sign(b1)·√D)/2, roots q/b2 and (b0 − y0)/q.
	q := -(b1 + math.Copysign(sq, b1)) / 2
	if q == 0 {
		return 0, 0, false
	}
	x1, x2 = q/b2, (b0-y0)/q
	if x1 > x2 {
		x1, x2 = x2, x1
	}
	in := func(x float64) bool { return x >= r.Range.Low && x <= r.Range.High }
	return x1, x2, x1 != x2 && in(x1) && in(x2)
}
