package calib

// Slope returns b1, the coefficient of x: the slope of a straight line, the
// slope at x = 0 of a quadratic (y = b0 + b1·x + b2·x²), b of a line through
// the origin. ok is false when r holds no fit of a known model.
func (r *Report) Slope() (b1 float64, ok bool) {
	c := r.Coefficients
	switch {
	case r.Model == LinearOrigin && len(c) == 1:
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
