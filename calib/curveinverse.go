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
	lo, hi := r.bandEdges(gap, x0, g0, step, t*se/x0)
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

// bandEdges returns the lower and upper edges of the band around x0
// (inside, gap g0 ≥ 0), each found by an edgeSearch. The two searches
// advance in lockstep: their evaluations of gap do not depend on each
// other, so the processor overlaps them (each evaluation is a chain of
// an exponential, divisions and a square root whose latency, not its
// instruction count, sets its time).
func (r *Report) bandEdges(gap func(float64) float64, x0, g0, step, rel float64) (lo, hi float64) {
	down := newEdgeSearch(-1, x0, g0, step, rel, math.Log(r.Range.Low*1e-6))
	up := newEdgeSearch(+1, x0, g0, step, rel, math.Log(r.Range.High*1e6))
	for {
		ul, okl := down.next()
		uh, okh := up.next()
		if !okl && !okh {
			return down.result, up.result
		}
		var gl, gh float64
		if okl {
			gl = gap(ul)
		}
		if okh {
			gh = gap(uh)
		}
		if okl {
			down.feed(gl)
		}
		if okh {
			up.feed(gh)
		}
	}
}

// edgeSearch walks from x0 (inside the band) in direction dir (−1 down,
// +1 up) by factors of step and finds the last x inside, refined in
// u = ln x to 1e-13 by regula falsi with the Illinois modification (which
// converges superlinearly on the smooth gap and moves both ends),
// bisecting when an interpolated point is not inside the bracket and
// stepping inside by edgeStep from an end it would land next to. Its
// result is +Inf going up and 0 going down when the band never closes
// before the walk's limit (ln x = lim). It is a state machine: next gives
// the u at which to evaluate the gap (u = −Inf for x = 0) or reports that
// the search is done (result set), and feed takes that gap.
type edgeSearch struct {
	dir      int
	phase    edgePhase
	lim, du  float64
	ui, uo   float64 // inside (gap ≥ 0) and outside ends
	gin      float64
	gout     float64
	side     int     // the end the last refinement moved (Illinois)
	pending  float64 // the u handed out by next
	u0, g0   float64 // ln x0 and its gap
	du1      float64 // the first probe's step
	count    int     // evaluations in the current phase
	result   float64
	finished bool
}

type edgePhase int

const (
	edgeWalk   edgePhase = iota // stepping out from x0
	edgeAtZero                  // the walk passed its lower limit: is x = 0 inside?
	edgeHalve                   // the band closes between 0 and e^ui: halving x
	edgeRefine                  // regula falsi on [ui, uo]
)

func newEdgeSearch(dir int, x0, g0, step, rel, lim float64) edgeSearch {
	e := edgeSearch{dir: dir, lim: lim, du: float64(dir) * math.Log(step), gin: g0, g0: g0}
	if dir < 0 && x0 <= 0 {
		e.finished, e.result = true, 0
		return e
	}
	e.ui = math.Log(x0)
	e.u0 = e.ui
	// The first probe: the delta-method end x0·(1 ± rel), in ln x.
	switch {
	case !(rel > 0) || !Finite(rel):
		e.du1 = e.du
	case dir > 0:
		e.du1 = math.Log1p(rel)
	case rel < 0.9:
		e.du1 = math.Log1p(-rel)
	default:
		e.du1 = -math.Log1p(rel)
	}
	return e
}

func (e *edgeSearch) done(x float64) (float64, bool) {
	e.finished, e.result = true, x
	return 0, false
}

// next returns the next u to evaluate, or false when the search is done.
func (e *edgeSearch) next() (float64, bool) {
	if e.finished {
		return 0, false
	}
	switch e.phase {
	case edgeWalk:
		u := e.ui + e.du
		switch {
		case e.count == 0:
			u = e.ui + e.du1
		case e.count == 1 && e.g0 > e.gin:
			// Still inside after the first probe: the secant through x0
			// and the probe, extended by 5 %, to step just past the edge
			// (at least a tenth of the first probe, at most four probes).
			d := 1.05 * (e.ui - e.u0) * e.gin / (e.g0 - e.gin)
			a := math.Abs(e.du1)
			u = e.ui + math.Copysign(min(max(math.Abs(d), 0.1*a), 4*a), float64(e.dir))
		}
		if e.count >= 4000 {
			return e.done(math.Exp(e.ui))
		}
		if (e.dir > 0 && u > e.lim) || (e.dir < 0 && u < e.lim) {
			if e.dir > 0 {
				return e.done(math.Inf(1))
			}
			e.phase = edgeAtZero
			e.pending = math.Inf(-1)
			return e.pending, true
		}
		e.pending = u
	case edgeHalve:
		u := e.ui - math.Ln2
		if e.count >= 200 || math.Exp(u) == 0 {
			return e.done(math.Exp(e.ui))
		}
		e.pending = u
	case edgeRefine:
		ui, uo := e.ui, e.uo
		if e.count >= 200 || math.Abs(uo-ui) <= 1e-13 {
			return e.done(math.Exp(ui))
		}
		um := 0.5 * (ui + uo)
		if v := ui + (uo-ui)*e.gin/(e.gin-e.gout); Finite(e.gin, e.gout, v) && e.gin != e.gout {
			// Rounding can put the interpolated point on an end (when
			// that end's gap is at rounding level): it is then next to
			// that end, which the safeguard below handles.
			um = min(max(v, min(ui, uo)), max(ui, uo))
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
			um = 0.5 * (ui + uo)
			if !(um > min(ui, uo) && um < max(ui, uo)) {
				return e.done(math.Exp(ui))
			}
		}
		e.pending = um
	}
	return e.pending, true
}

// feed takes the gap at the u that next returned.
func (e *edgeSearch) feed(g float64) {
	u := e.pending
	e.count++
	switch e.phase {
	case edgeWalk, edgeHalve:
		// Inside: the walk (or the halving) goes on from here; outside:
		// the bracket is found.
		if g >= 0 {
			e.ui, e.gin = u, g
			return
		}
		e.uo, e.gout = u, g
		e.phase, e.count = edgeRefine, 0
	case edgeAtZero:
		if g >= 0 {
			e.done(0)
			return
		}
		e.phase, e.count = edgeHalve, 0
	case edgeRefine:
		if g >= 0 {
			e.ui, e.gin = u, g
			if e.side == -1 {
				e.gout /= 2 // Illinois: the end that stays loses half its weight
			}
			e.side = -1
		} else {
			e.uo, e.gout = u, g
			if e.side == 1 {
				e.gin /= 2
			}
			e.side = 1
		}
	}
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
