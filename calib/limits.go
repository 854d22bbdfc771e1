package calib

import "math"

// computeLimits returns the detection and quantification limits of the fit.
//
// ICH Q2(R2): LOD = 3.3·σ/S, LOQ = 10·σ/S, S the slope; for the quadratic,
// S is the sensitivity b1 + 2·b2·x at the lowest fitted standard. ICH Q2
// lets σ be the SD of the blank, the residual SD of the regression or the
// SD of the intercept; wo.LimitSigma chooses (see limitSigma), and
// Limits.SigmaBasis names the one used.
//
// ISO 11843-2 (constant SD; DIN 32645): for K = 1 reading of the unknown,
// R = √[1/K + Var(b0)/s²] (for the line Var(b0)/s² = 1/Σw + x̄w²/Sxx,w, i.e.
// ISO's 1/(IJ) + x̄²/(J·Sxx)), y_c = b0 + t(0.95; df)·s·R,
// x_c = t(0.95; df)·s·R/|S|, x_d ≈ 2·x_c (α = β = 0.05). The reading's own
// term s²/K takes the same σ as the ICH limits, σ²/K, so that with weights
// the reading of a blank has the SD the weighting implies at the low end
// (unweighted, σ = s and this is ISO's form). For the origin model the blank
// response is 0 without uncertainty, so R = √(1/K).
//
// Preconditions: S ≠ 0.
func computeLimits(r *Report, f lsq, wo WeightOptions, t *text) Limits {
	c := r.Coefficients
	var b0, slope float64
	switch r.Model {
	case LinearOrigin, AverageRF:
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
	ls := r.limitSigma(wo)
	if !ls.ok {
		return Limits{Detail: "not computed: " + ls.why}
	}
	sigma := ls.sigma
	l := Limits{Computed: true, LOD: 3.3 * sigma / as, LOQ: 10 * sigma / as, SigmaBasis: ls.basis, Sigma: sigma}
	q := 1.0 // σ/s
	if sigma != s && s > 0 {
		q = sigma / s
	}
	rr := q
	if !originLine(r.Model) {
		rr = math.Sqrt(q*q + f.xtwx[0])
	}
	tq := studentT(0.95, r.DF)
	l.CriticalValue = b0 + math.Copysign(tq*s*rr, slope)
	l.CriticalConc = tq * s * rr / as
	l.DetectionLimit = 2 * l.CriticalConc
	t.s("LOD = 3.3·σ/S and LOQ = 10·σ/S (ICH Q2(R2)) with σ = ").g(sigma).s(", ")
	switch ls.basis {
	case SigmaBlank:
		t.s("the SD of the ").i(ls.n).s(" readings at nominal zero (blank_sd; readings excluded from the fit count, as blanks are not regressed under ICH M10)")
	case SigmaLowestLevel:
		t.s("the SD the weighting implies at the lowest non-zero standard x = ").g(ls.x).s(", s/√w = ").g(s).s("/√").g(ls.w).s(" (lowest_level_sd)")
	default:
		t.s("the residual SD (residual_sd")
		if r.Weighting != WeightNone {
			t.s("; with ").s(string(r.Weighting)).s(" weighting it is the SD of a reading of unit weight on the Σw = n scale, not the SD at the low end")
		}
		t.s(")")
	}
	if ls.note != "" {
		t.s("; ").s(ls.note)
	}
	t.s(", and S = ").g(slope)
	if r.Model == Quadratic {
		t.s(" (the quadratic's sensitivity b1 + 2·b2·x at the lowest standard x = ").g(r.Range.Low).s(")")
	}
	t.s(". Critical value y_c, x_c and minimum detectable x_d ≈ 2·x_c by ISO 11843-2 for one reading of the unknown with SD σ, α = β = 0.05, t(0.95; ").
		i(r.DF).s(") = ").g(tq).s(", assuming a constant response SD")
	if r.Weighting != WeightNone || ls.basis == SigmaBlank {
		t.s(" near the low end; with weights or a blank SD these limits are approximations")
	}
	if originLine(r.Model) {
		t.s("; the origin model takes the blank response as exactly 0")
	}
	t.s(".")
	return l
}

// sigmaChoice is the σ of the limits and where it came from.
type sigmaChoice struct {
	basis SigmaBasis
	sigma float64
	n     int     // blank readings (blank_sd)
	x, w  float64 // lowest non-zero standard and a reading's weight there (lowest_level_sd)
	note  string  // why auto did not take the blank
	ok    bool
	why   string // when !ok
}

// limitSigma returns σ under wo.LimitSigma:
//
//   - blank_sd: the sample SD of every reading at nominal zero (fitted or
//     excluded), which needs two or more readings and an SD above zero;
//   - lowest_level_sd: s/√w, w the weight (Σw = n scale) of a reading at the
//     lowest non-zero standard, its response taken from the curve: the SD the
//     weighting implies there (unweighted, w = 1 and σ = s);
//   - residual_sd: s, the SD of a reading of unit weight;
//   - auto: blank_sd when there are wo.MinReplicates or more blank readings
//     with an SD above zero, else lowest_level_sd.
func (r *Report) limitSigma(wo WeightOptions) sigmaChoice {
	s := r.ResidualSD
	want := wo.LimitSigma
	var sc sigmaChoice
	if want == SigmaBlank || want == SigmaAuto {
		var n int
		var sum float64
		for _, p := range r.Points {
			if p.X == 0 {
				n++
				sum += p.Y
			}
		}
		var ss float64
		for _, p := range r.Points {
			if p.X == 0 {
				d := p.Y - sum/float64(n)
				ss += d * d
			}
		}
		sd := 0.0
		if n > 1 {
			sd = math.Sqrt(ss / float64(n-1))
		}
		usable := n >= 2 && sd > 0
		switch {
		case want == SigmaBlank && !usable:
			return sigmaChoice{why: "the method takes σ from the blank (blank_sd), which needs two or more readings at nominal zero with an SD above zero; the run has " + itoa(n)}
		case want == SigmaBlank || (usable && n >= wo.MinReplicates):
			return sigmaChoice{basis: SigmaBlank, sigma: sd, n: n, ok: true}
		case n > 0:
			sc.note = "the " + itoa(n) + " blank reading(s) are fewer than " + itoa(wo.MinReplicates) + " or agree exactly, so σ is not taken from the blank"
		}
		want = SigmaLowestLevel
	}
	if want == SigmaResidual {
		return sigmaChoice{basis: SigmaResidual, sigma: s, ok: true}
	}
	x := math.Inf(1)
	for _, p := range r.Points {
		if !p.Excluded && p.X > 0 && p.X < x {
			x = p.X
		}
	}
	if math.IsInf(x, 1) {
		return sigmaChoice{why: "no non-zero standard was fitted"}
	}
	var v [3]float64
	basis(r.Model, x, v[:])
	var yhat float64
	for j, c := range r.Coefficients {
		yhat += c * v[j]
	}
	w := r.unknownWeight(x, yhat)
	sc.basis, sc.x, sc.w, sc.ok = SigmaLowestLevel, x, w, true
	sc.sigma = s
	if w != 1 {
		sc.sigma = s / math.Sqrt(w)
	}
	return sc
}
