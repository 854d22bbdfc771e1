package calib

import (
	"math"
	"slices"
)

// CurveOptions selects a non-linear model and, optionally, starting values
// and fixed parameters. Coefficient order is the model's (see FourPL).
type CurveOptions struct {
	Model Model
	// Start, when not nil, has one entry per coefficient: a number
	// replaces that coefficient's self-starting value, NaN keeps it.
	Start []float64
	// Fixed, when not nil, has one entry per coefficient: a number holds
	// the coefficient at that value (not fitted, not counted against the
	// degrees of freedom; e.g. a 4PL's a fixed to the blank's mean
	// response), NaN leaves it free.
	Fixed   []float64
	MaxIter int // Levenberg–Marquardt iteration cap; 0 means 200
}

// CurveFit is a fitted non-linear calibration curve. Only a fit whose
// Outcome is Converged predicts.
type CurveFit struct {
	Model          Model
	Coefficients   []float64   // in the model's order
	StandardErrors []float64   // 0 for fixed coefficients, and all 0 unless Converged
	Covariance     [][]float64 // s²(JᵀWJ)⁻¹ at the solution, Σw = n scale; nil unless Converged
	Fixed          []bool
	Start          []float64 // the starting values used (self-started or given)
	AtBound        []bool    // coefficient ended on its bound (see curveBounds)
	Outcome        Outcome
	Criterion      string // which convergence criterion held, or why the fit stopped
	Iterations     int
	ResidualSD     float64 // s = √(Σw(y − ŷ)²/DF), weights normalised to Σw = n
	SSR            float64 // Σw(y − ŷ)² on the same scale
	DF             int     // n − free coefficients
	N              int
	// WeightScale turns a raw weight (as given to FitCurve) into its weight
	// on the Σw = n scale.
	WeightScale float64
	Residuals   []float64 // y − ŷ, in the order of the readings
	Range       Range     // lowest and highest concentration of the standards
	Cautions    []string
	Engine      string
}

// FitCurve fits a non-linear calibration model (FourPL, FivePL, Power,
// ExpSaturation, ExpSaturationOffset) to readings (x, y) with weights w
// (nil for unit weights) by SolveNLLS, from self-starting values computed
// from the data (see selfStart), overridden by opt.Start, with opt.Fixed
// coefficients held.
//
// Weights are normalised to Σw = n before the residual SD is reported, as
// for the straight line (FIELD-NOTES §1); the coefficients and their
// covariance do not depend on that scale. Bounds keep the model defined
// (see curveBounds). Each reading counts as one observation.
//
// Preconditions (an *InputError otherwise): equal lengths, finite values,
// x ≥ 0 with at least two distinct x > 0, positive finite weights, more
// readings than free coefficients, responses that are not all equal, and
// Start and Fixed (when given) of the model's length, within the bounds.
// A fit that does not converge is returned with its Outcome, not as an
// error.
func FitCurve(x, y, w []float64, opt CurveOptions) (*CurveFit, error) {
	c := curveOf(opt.Model)
	if c == nil {
		return nil, inputErr("options.model", "%q is not a non-linear model", opt.Model)
	}
	p := c.NumParams()
	if err := checkCurveData(x, y, w); err != nil {
		return nil, err
	}
	for _, o := range [...]struct {
		name string
		v    []float64
	}{{"options.start", opt.Start}, {"options.fixed", opt.Fixed}} {
		if o.v != nil && len(o.v) != p {
			return nil, inputErr(o.name, "%d values for the %d coefficients of %s", len(o.v), p, opt.Model)
		}
		for j := range o.v {
			if math.IsInf(o.v[j], 0) {
				return nil, inputErr(o.name, "coefficient %d is infinite", j)
			}
		}
	}
	n := len(x)
	sc := getScratch()
	defer sc.release()
	wl := sc.f.take(2 * n)
	// wn: the weights on the Σw = n scale; lx: ln x (−Inf at 0), shared by
	// the self-start and the solver.
	wn, lx := wl[:n:n], wl[n:]
	for i, v := range x {
		if i > 0 && v == x[i-1] {
			lx[i] = lx[i-1] // a replicate of the reading before
			continue
		}
		lx[i] = math.Log(v)
	}
	var sw float64
	for i := range wn {
		wn[i] = 1
		if w != nil {
			wn[i] = w[i]
		}
		sw += wn[i]
	}
	scale := float64(n) / sw
	for i := range wn {
		wn[i] *= scale
	}
	if math.IsInf(scale, 0) || !(scale > 0) {
		return nil, inputErr("weights", "the weights cannot be normalised (their sum is not finite)")
	}
	lower, upper := curveBounds(opt.Model, x, sc.f.take(2*p))
	fixed := make([]bool, p)
	for j := range opt.Fixed {
		fixed[j] = !math.IsNaN(opt.Fixed[j])
	}
	rep := groupReplicates(x, lx, y, wn, sc)
	start, err := selfStart(opt.Model, x, lx, y, wn, opt, lower, upper, rep, sc)
	if err != nil {
		return nil, err
	}
	for j := 0; j < p; j++ {
		if opt.Start != nil && !math.IsNaN(opt.Start[j]) {
			start[j] = opt.Start[j]
		}
		if fixed[j] {
			start[j] = opt.Fixed[j]
		}
		if !(start[j] >= lower[j] && start[j] <= upper[j]) {
			return nil, inputErr("options.start", "coefficient %d: %v lies outside its bounds [%v, %v]", j, start[j], lower[j], upper[j])
		}
	}
	res, err := solveNLLS(c, x, lx, y, wn, NLLSOptions{Start: start, Fixed: fixed, Lower: lower, Upper: upper, MaxIter: opt.MaxIter}, rep)
	if err != nil {
		return nil, err
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, v := range x {
		lo, hi = min(lo, v), max(hi, v)
	}
	f := &CurveFit{
		Model: opt.Model, Coefficients: res.Params, StandardErrors: res.StdErrors, Covariance: res.Covariance,
		Fixed: fixed, Start: start, AtBound: res.AtBound, Outcome: res.Outcome, Criterion: res.Criterion,
		Iterations: res.Iterations, ResidualSD: res.ResidualSD, SSR: res.SSR, DF: res.DF, N: n,
		WeightScale: scale, Residuals: res.Residuals, Range: Range{Low: lo, High: hi},
		Cautions: Cautions(), Engine: EngineVersion,
	}
	if f.Outcome != Converged || f.StandardErrors == nil {
		f.Covariance, f.StandardErrors = nil, make([]float64, p)
	}
	return f, nil
}

// checkCurveData validates the readings of FitCurve.
func checkCurveData(x, y, w []float64) error {
	if len(y) != len(x) || (w != nil && len(w) != len(x)) {
		return inputErr("points", "x, y and weights differ in length")
	}
	pos, distinct := math.NaN(), false // a positive concentration; a second one seen
	for i := range x {
		if !Finite(x[i], y[i]) {
			return inputErr("points", "reading %d is not finite", i)
		}
		if x[i] < 0 {
			return inputErr("points", "reading %d: negative concentration %v", i, x[i])
		}
		if w != nil && !(w[i] > 0 && !math.IsInf(w[i], 0)) {
			return inputErr("weights", "weight %d is not positive and finite", i)
		}
		if x[i] > 0 {
			if math.IsNaN(pos) {
				pos = x[i]
			}
			distinct = distinct || x[i] != pos
		}
	}
	if !distinct {
		return inputErr("points", "at least two distinct positive concentrations are needed")
	}
	if slices.Min(y) == slices.Max(y) {
		return inputErr("points", "the responses have no spread")
	}
	return nil
}

// curveBounds returns the box of each model's coefficients, which keeps it
// defined and identifiable (x⁺ₘᵢₙ and xₘₐₓ are the smallest positive and
// the largest concentration; the bounds scale with the concentrations):
//
//	logistic: b in [1e-6, 1e3], c in [1e-6·x⁺ₘᵢₙ, 1e6·xₘₐₓ], g in [1e-3, 1e3]
//	power:    b in [1e-6, 1e3]
//	exponential: b in [1e-9/xₘₐₓ, 1e9/x⁺ₘᵢₙ]
//
// Responses (a, d, y0) are unbounded.
// lu is 2·NumParams of memory for the two.
func curveBounds(m Model, x []float64, lu []float64) (lower, upper []float64) {
	xmin, xmax := math.Inf(1), 0.0
	for _, v := range x {
		if v > 0 {
			xmin = min(xmin, v)
		}
		xmax = max(xmax, v)
	}
	p := curveOf(m).NumParams()
	lower, upper = lu[:p:p], lu[p:2*p]
	for j := range lower {
		lower[j], upper[j] = math.Inf(-1), math.Inf(1)
	}
	switch m {
	case FourPL, FivePL:
		lower[1], upper[1] = 1e-6, 1e3
		lower[2], upper[2] = 1e-6*xmin, 1e6*xmax
		if m == FivePL {
			lower[4], upper[4] = 1e-3, 1e3
		}
	case Power:
		lower[1], upper[1] = 1e-6, 1e3
	case ExpSaturation, ExpSaturationOffset:
		lower[1], upper[1] = 1e-9/xmax, 1e9/xmin
	}
	return lower, upper
}
