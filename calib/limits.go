package calib

import "math"

// computeLimits returns the detection and quantification limits of the fit.
//
// ICH Q2(R2): LOD = 3.3·σ/S, LOQ = 10·σ/S, σ = the residual SD s(y/x) and S
// the slope; for the quadratic, S is the sensitivity b1 + 2·b2·x at the
// lowest fitted standard.
//
// ISO 11843-2 (constant SD; DIN 32645): for K = 1 reading of the unknown,
// R = √[1/K + Var(b0)/s²] (for the line Var(b0)/s² = 1/Σw + x̄w²/Sxx,w, i.e.
// ISO's 1/(IJ) + x̄²/(J·Sxx)), y_c = b0 + t(0.95; df)·s·R,
// x_c = t(0.95; df)·s·R/|S|, x_d ≈ 2·x_c (α = β = 0.05). For the origin
// model the blank response is 0 without uncertainty, so R = √(1/K).
//
// Preconditions: S ≠ 0. With weighting, s is the SD of a reading of unit
// weight on the Σw = n scale and the constant-SD form of ISO 11843-2 is then
// an approximation; the Detail says so.
func computeLimits(r *Report, f lsq, t *text) Limits {
	c := r.Coefficients
	var b0, slope float64
	switch r.Model {
	case LinearOrigin:
		slope = c[0]
	case Quadratic:
		b0, slope = c[0], c[1]+2*c[2]*r.Range.Low
	default:
		b0, slope = c[0], c[1]
	}
	if slope == 0 || math.IsNaN(slope) || math.IsInf(slope, 0) {
		return Limits{Detail: "not computed: the sensitivity at the lowest standard is zero"}
	}
	s, as := r.ResidualSD, math.Abs(slope)
	l := Limits{Computed: true, LOD: 3.3 * s / as, LOQ: 10 * s / as}
	rr := 1.0
	if r.Model != LinearOrigin {
		rr = math.Sqrt(1 + f.xtwx[0])
	}
	tq := studentT(0.95, r.DF)
	l.CriticalValue = b0 + math.Copysign(tq*s*rr, slope)
	l.CriticalConc = tq * s * rr / as
	l.DetectionLimit = 2 * l.CriticalConc
	t.s("LOD = 3.3·σ/S and LOQ = 10·σ/S (ICH Q2(R2)) with σ = residual SD ").g(s).s(" and S = ").g(slope)
	if r.Model == Quadratic {
		t.s(" (the quadratic's sensitivity b1 + 2·b2·x at the lowest standard x = ").g(r.Range.Low).s(")")
	}
	t.s(". Critical value y_c, x_c and minimum detectable x_d ≈ 2·x_c by ISO 11843-2 for one reading of the unknown, α = β = 0.05, t(0.95; ").
		i(r.DF).s(") = ").gc(tq).s(", assuming a constant response SD")
	if r.Weighting != WeightNone {
		t.s("; with ").s(string(r.Weighting)).s(" weighting σ is the SD of a reading of unit weight on the Σw = n scale, so these limits are approximations")
	}
	if r.Model == LinearOrigin {
		t.s("; the origin model takes the blank response as exactly 0")
	}
	t.s(".")
	return l
}
