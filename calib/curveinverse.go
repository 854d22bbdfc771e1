package calib

import "math"

// predictCurve is Report.Predict for the non-linear models: x̂0 from the
// closed-form inverse of the curve, its delta-method standard error
//
//	s(x̂0)² = [s²/(m·w0) + ∇βf(x̂0)ᵀ·Cov(β)·∇βf(x̂0)] / f′(x̂0)²
//
// and the interval by inverting the prediction band of the mean of m
// readings: every x ≥ 0 with |f(x) − ȳ0| ≤ t(1 − α/2; DF)·√(s²/(m·w0(x)) +
// ∇βf(x)ᵀ·Cov·∇βf(x)), w0(x) the weight an unknown at x gets. The band is
// walked outwards from x̂0 in steps of half the delta-method half-width (2 % to 100 % of x̂0), up to 10⁶ times the
// range's ends, and each crossing is refined by bisection; a band that
// does not close above leaves the upper bound open (Interval.HighOpen,
// +∞), one that does not close below bounds it at 0 (no negative
// concentration). A response outside the asymptotes gives no
// concentration and a flag naming the asymptote.
func (r *Report) predictCurve(y0 float64, m int, confidence float64, pr *Prediction) error {
	c := curveOf(r.Model)
	if len(r.Coefficients) != c.NumParams() || len(r.Covariance) != c.NumParams() || r.Curve == nil {
		return inputErr("report.coefficients", "the curve did not converge (a failed run has no curve)")
	}
	if r.DF < 1 {
		return inputErr("report.df", "no residual degrees of freedom")
	}
	pr.Method = "band_inversion"
	pr.Interval.Level = confidence
	beta := r.Coefficients
	x0, flag, ok := c.invert(y0, beta)
	if !ok {
		pr.Flags = append(pr.Flags, flag, FlagUnbounded)
		return nil
	}
	pr.Flags = r.Range.appendFlags(pr.Flags, x0)
	pr.Concentration = x0 * pr.Dilution
	cv := r.newCurveVar(c, m)
	f0, v0, sl := cv.at(x0)
	se := math.Sqrt(v0) / math.Abs(sl)
	if Finite(se) {
		pr.StandardError = se * pr.Dilution
	}
	t := studentT(1-(1-confidence)/2, r.DF)
	// gapOf(f(x), variance) ≥ 0 ⇔ ȳ0 lies inside the band at x (−Inf
	// where the band is not finite).
	gapOf := func(fx, v float64) float64 {
		if !Finite(fx, v) {
			return math.Inf(-1)
		}
		return t*math.Sqrt(v) - math.Abs(fx-y0)
	}
	// gap in u = ln x (−Inf for x = 0): a logistic is evaluated from
	// ln(x/c) = u − ln c, with no logarithm or exponential of x.
	gap := func(u float64) float64 {
		if cv.logistic && !math.IsInf(u, -1) {
			fx, v, _ := cv.atLogU(u - cv.lnc)
			return gapOf(fx, v)
		}
		fx, v, _ := cv.at(math.Exp(u))
		return gapOf(fx, v)
	}
	g0 := gapOf(f0, v0)
	if !(g0 >= 0) {
		// Rounding at an extreme x̂0: no band to invert.
		pr.Flags = append(pr.Flags, FlagUnbounded)
		return nil
	}
	// Steps of about half the delta-method half-width (at least 2 %)
	// reach the band's edges in a few evaluations.
	step := 1.02
	if rel := t * se / x0; Finite(rel) {
		step = 1 + min(max(0.5*rel, 0.02), 1)
	}
	lo := r.bandEdge(gap, x0, g0, -1, step)
	hi := r.bandEdge(gap, x0, g0, +1, step)
	pr.Interval.Low = lo * pr.Dilution
	if math.IsInf(hi, 1) {
		pr.Interval.HighOpen = true
		pr.Flags = append(pr.Flags, FlagUnbounded)
		return nil
	}
	pr.Interval.High = hi * pr.Dilution
	pr.Interval.Bounded = true
	return nil
}

// bandEdge walks from x0 (inside the band, gap g0 ≥ 0) in direction dir (−1
// down, +1 up) by factors of step and returns the last x inside, refined
// in log x to 1e-13 relative by regula falsi with the Illinois
// modification (which converges superlinearly on the smooth gap and moves
// both ends), bisecting when an interpolated point is not finite or not
// inside the bracket and stepping inside by edgeStep from an end it
// would land next to; +Inf going up and 0 going down when the band never
// closes. gap takes u = ln x (−Inf for x = 0): the walk and the
// refinement both work in u, and x is computed once, at the end.
func (r *Report) bandEdge(gap func(float64) float64, x0, g0 float64, dir int, step float64) float64 {
	lim := math.Log(r.Range.High * 1e6)
	if dir < 0 {
		lim = math.Log(r.Range.Low * 1e-6)
		if x0 <= 0 {
			return 0
		}
	}
	ui := math.Log(x0)
	u := ui
	gin := g0
	var gout float64
	du := float64(dir) * math.Log(step)
	zero := false // the walk went below lim: the outer end is x = 0
	for range 4000 {
		u += du
		if (dir > 0 && u > lim) || (dir < 0 && u < lim) {
			if dir > 0 {
				return math.Inf(1)
			}
			if gap(math.Inf(-1)) >= 0 {
				return 0
			}
			zero = true
			break
		}
		gout = gap(u)
		if !(gout >= 0) {
			break
		}
		ui, gin = u, gout
	}
	uo := u
	if zero {
		// The band closes between 0 and e^ui: halve x towards 0 until a
		// point outside has x > 0, then refine in log x.
		found := false
		for range 200 {
			mid := ui - math.Ln2
			if math.Exp(mid) == 0 {
				return math.Exp(ui)
			}
			g := gap(mid)
			if g >= 0 {
				ui, gin = mid, g
				continue
			}
			uo, gout, found = mid, g, true
			break
		}
		if !found {
			return math.Exp(ui)
		}
	}
	// Regula falsi in u on [ui, uo], gap(ui) ≥ 0 > gap(uo). An infinite
	// gap outside is replaced by bisection.
	side := 0
	for range 200 {
		if math.Abs(uo-ui) <= 1e-13 {
			break
		}
		um := 0.5 * (ui + uo)
		if Finite(gin, gout) && gin != gout {
			if v := ui + (uo-ui)*gin/(gin-gout); v > min(ui, uo) && v < max(ui, uo) {
				um = v
			}
			// A point within edgeStep of an end moves inside by edgeStep
			// (Brent's safeguard): once an end lies next to the crossing,
			// whose gap is then at rounding level, the next evaluation
			// closes the bracket to the tolerance instead of the
			// interpolation landing on that end and bisection taking over.
			if math.Abs(uo-ui) > 2*edgeStep {
				switch {
				case math.Abs(um-uo) < edgeStep:
					um = uo + math.Copysign(edgeStep, ui-uo)
				case math.Abs(um-ui) < edgeStep:
					um = ui + math.Copysign(edgeStep, uo-ui)
				}
			}
		}
		if !(um > min(ui, uo) && um < max(ui, uo)) {
			break
		}
		g := gap(um)
		if g >= 0 {
			ui, gin = um, g
			if side == -1 {
				gout /= 2 // Illinois: the end that stays loses half its weight
			}
			side = -1
		} else {
			uo, gout = um, g
			if side == 1 {
				gin /= 2
			}
			side = 1
		}
	}
	return math.Exp(ui)
}

// edgeStep is the safeguard step of bandEdge in ln x: 0.4 of its
// tolerance of 1e-13 relative.
const edgeStep = 0.4e-13

// curveMeanBand is MeanBand for a non-linear model: t·√(∇βfᵀ·Cov·∇βf),
// the delta-method band of the fitted curve.
func (r *Report) curveMeanBand(c calibCurve, x float64) (float64, bool) {
	p := c.NumParams()
	if len(r.Coefficients) != p || len(r.Covariance) != p {
		return 0, false
	}
	t, err := tQuantile(r.Confidence, r.DF)
	if err != nil {
		return 0, false
	}
	grad := make([]float64, p)
	c.Eval(x, r.Coefficients, grad)
	v := quadForm(r.Covariance, grad)
	h := t * math.Sqrt(max(v, 0))
	return h, Finite(h)
}
