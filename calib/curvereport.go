package calib

import (
	"cmp"
	"maps"
	"math"
	"slices"
	"strings"

	"gonum.org/v1/gonum/stat/distuv"
)

// WeightVarPower weights a non-linear fit by a power-of-the-mean variance
// function Var(y) = σ²·|ŷ|^(2θ) (nlme's varPower), θ estimated from the
// replicates by iterating fit and weights (see estimateTheta). Only the
// non-linear models accept it.
const WeightVarPower Weighting = "power_of_mean"

// Check names of the non-linear models (beside min_levels, back_calculation,
// lack_of_fit and monotonic, which they share with the linear ones).
const (
	CheckConvergence      = "convergence"
	CheckPrecisionProfile = "precision_profile"
)

// Defaults of the non-linear checks.
const (
	// CurveBackCalcTolerancePct and CurveBackCalcEndTolerancePct: ICH M10
	// (2022) ligand-binding assays, back-calculated calibrators within
	// ±20 % of nominal, ±25 % at the LLOQ and the ULOQ.
	CurveBackCalcTolerancePct    = 20
	CurveBackCalcEndTolerancePct = 25
	// ProfileCVLimitPct: the precision profile's working range is where the
	// CV of the back-calculated concentration stays at or under 20 %
	// (common practice for immunoassay functional sensitivity).
	ProfileCVLimitPct = 20
	// AnchorPrefix: a calibrator whose level label starts with "anchor"
	// (any case) is an anchor point: fitted, outside the range, never
	// judged (ICH M10 ligand-binding assays).
	AnchorPrefix = "anchor"
)

// CurveModels lists the non-linear models a method may name.
func CurveModels() []Model {
	return []Model{FourPL, FivePL, Power, ExpSaturation, ExpSaturationOffset}
}

// IsCurveModel reports whether m is one of CurveModels.
func IsCurveModel(m Model) bool { return curveOf(m) != nil }

// CurveWeightings lists the weightings a non-linear model accepts.
func CurveWeightings() []Weighting {
	return []Weighting{WeightNone, WeightInvY2, WeightInvS2, WeightVarPower}
}

// ParameterNames returns the names of a non-linear model's coefficients in
// the order of Report.Coefficients (see FourPL for their meaning), or nil.
func ParameterNames(m Model) []string {
	switch m {
	case FourPL:
		return []string{"a", "b", "c", "d"}
	case FivePL:
		return []string{"a", "b", "c", "d", "g"}
	case Power, ExpSaturation:
		return []string{"a", "b"}
	case ExpSaturationOffset:
		return []string{"a", "b", "y0"}
	}
	return nil
}

// Equation returns a non-linear model's equation in its parameter names
// (see FourPL), or "".
func Equation(m Model) string {
	switch m {
	case FourPL:
		return "y = d + (a − d)/(1 + (x/c)^b)"
	case FivePL:
		return "y = d + (a − d)/(1 + (x/c)^b)^g"
	case Power:
		return "y = a·x^b"
	case ExpSaturation:
		return "y = a·(1 − e^(−b·x))"
	case ExpSaturationOffset:
		return "y = y0 + a·(1 − e^(−b·x))"
	}
	return ""
}

// CurveParameters names coefficients of a non-linear model (see
// ParameterNames) whose starting value replaces the self-started one
// (Start) or that are held at a value and not fitted (Fixed; for example a
// 4PL's lower asymptote a fixed to the blank's response). A fixed
// coefficient does not count against the degrees of freedom and has no
// standard error.
type CurveParameters struct {
	Start map[string]float64 `json:"start,omitempty"`
	Fixed map[string]float64 `json:"fixed,omitempty"`
}

// IsZero reports whether p names no coefficient.
func (p CurveParameters) IsZero() bool { return len(p.Start) == 0 && len(p.Fixed) == 0 }

// Equal reports whether p and q name the same values.
func (p CurveParameters) Equal(q CurveParameters) bool {
	return maps.Equal(p.Start, q.Start) && maps.Equal(p.Fixed, q.Fixed)
}

// Check validates p for model m: only a non-linear model takes
// parameters, each name is one of the model's, each value finite, and a
// coefficient is not both started and fixed. The error's field is
// "options.curve", or "options.curve.start.NAME" / "options.curve.fixed.NAME".
func (p CurveParameters) Check(m Model) error {
	if p.IsZero() {
		return nil
	}
	names := ParameterNames(m)
	if names == nil {
		return inputErr("options.curve", "the model %s has no non-linear coefficients to start or fix", m)
	}
	for _, g := range [...]struct {
		field string
		v     map[string]float64
	}{{"start", p.Start}, {"fixed", p.Fixed}} {
		for name, v := range g.v {
			if !slices.Contains(names, name) {
				return inputErr("options.curve."+g.field+"."+name, "%q is not a coefficient of %s (%s)", name, m, strings.Join(names, ", "))
			}
			if !Finite(v) {
				return inputErr("options.curve."+g.field+"."+name, "the value is not a finite number")
			}
			if _, both := p.Fixed[name]; both && g.field == "start" {
				return inputErr("options.curve."+g.field+"."+name, "%q is both started and fixed", name)
			}
		}
	}
	return nil
}

// arrays returns p as CurveOptions' Start and Fixed (NaN where unnamed),
// nil when p names nothing of that kind.
func (p CurveParameters) arrays(m Model) (start, fixed []float64) {
	names := ParameterNames(m)
	conv := func(v map[string]float64) []float64 {
		if len(v) == 0 {
			return nil
		}
		out := make([]float64, len(names))
		for j, n := range names {
			out[j] = math.NaN()
			if x, ok := v[n]; ok {
				out[j] = x
			}
		}
		return out
	}
	return conv(p.Start), conv(p.Fixed)
}

// CurveDetails is what a Report of a non-linear model adds (nil for the
// least-squares models).
type CurveDetails struct {
	ParameterNames []string
	Fixed          []bool
	Start          []float64
	Outcome        string // converged, stalled, iteration_limit, singular
	Criterion      string
	Iterations     int
	// Theta is the exponent of the variance function Var(y) = σ²·|ŷ|^(2θ)
	// an unknown's weight follows: 0 unweighted, 1 for 1/y², estimated for
	// power_of_mean and 1/s² (ThetaMethod says how).
	Theta       float64
	ThetaMethod string
	// ThetaIterations counts the fit–weight rounds of power_of_mean.
	ThetaIterations int
	// ResponseFloor keeps |ŷ|^(2θ) away from zero: the smallest non-zero
	// |fitted response| of a calibrator.
	ResponseFloor float64
	// Replicates is the readings per unknown the precision profile assumes
	// (the median readings per calibrator level).
	Replicates int
	Profile    []ProfilePoint
	// ProfileLimitPct is the CV limit of the working range.
	ProfileLimitPct float64
	// WorkingRange is the widest interval of the profile inside the
	// calibrated range where CV ≤ ProfileLimitPct; HasWorkingRange false
	// when there is none.
	WorkingRange    Range
	HasWorkingRange bool
	Anchors         []string // level labels of anchor calibrators
	LogX            bool     // plot on a log concentration axis (logistic models)
}

// ProfilePoint is one point of the precision profile: the CV (%) of the
// concentration read back from the mean of Replicates readings at X.
type ProfilePoint struct {
	X     float64
	CVPct float64
	OK    bool // false when no SE exists there (flat curve); CVPct is 0
}

// curveLevel is one calibrator level of a non-linear fit.
type curveLevel struct {
	label    string
	x        float64
	idx      []int // indices into the fitted readings
	anchor   bool
	meanY    float64
	sd       float64
	hasSD    bool
	meanYHat float64
}

// fitCurveReport is Fit for the non-linear models.
func fitCurveReport(points []Point, opt Options) (*Report, error) {
	opt, err := resolveCurveOptions(opt)
	if err != nil {
		return nil, err
	}
	sc := getScratch()
	defer sc.release()
	xyw := sc.f.take(3 * len(points)) // x, y and the weights of the fitted readings
	x, y := xyw[0:0:len(points)], xyw[len(points):len(points):2*len(points)]
	pidx := sc.i.take(len(points))[:0]
	for i, p := range points {
		if !Finite(p.X, p.Y) {
			return nil, inputErr("points["+itoa(i)+"]", "reading is not a finite number")
		}
		if p.Excluded {
			continue
		}
		x, y, pidx = append(x, p.X), append(y, p.Y), append(pidx, i)
	}
	levels := groupCurveLevels(points, pidx, sc)
	c := curveOf(opt.Model)
	np := c.NumParams()
	if len(x) <= np {
		return nil, inputErr("points", "%d fitted readings for %d coefficients of %s", len(x), np, opt.Model)
	}
	cd := &CurveDetails{ParameterNames: ParameterNames(opt.Model), ProfileLimitPct: ProfileCVLimitPct,
		LogX: opt.Model == FourPL || opt.Model == FivePL}
	for _, l := range levels {
		if l.anchor {
			cd.Anchors = append(cd.Anchors, l.label)
		}
	}
	w := xyw[2*len(points) : 2*len(points)+len(x)]
	var fit *CurveFit
	co := CurveOptions{Model: opt.Model}
	co.Start, co.Fixed = opt.Curve.arrays(opt.Model)
	switch opt.Weighting {
	case WeightNone:
		fit, err = FitCurve(x, y, nil, co)
		cd.ThetaMethod = "unweighted: θ = 0"
	case WeightInvY2:
		for i, v := range y {
			w[i] = 1 / (v * v)
			if v == 0 {
				return nil, inputErr("points", "1/y² weighting: reading %d has response 0", pidx[i])
			}
		}
		fit, err = FitCurve(x, y, w, co)
		cd.Theta, cd.ThetaMethod = 1, "1/y²: θ = 1 (an unknown is weighted 1/ŷ² at its concentration)"
	case WeightInvS2:
		floor := math.Inf(1)
		for _, l := range levels {
			if !l.hasSD {
				return nil, inputErr("points", "1/s² weighting: level %q has fewer than two readings", l.label)
			}
			if l.sd > 0 {
				floor = min(floor, l.sd)
			}
		}
		if math.IsInf(floor, 1) {
			return nil, inputErr("points", "1/s² weighting: every level's replicates are identical")
		}
		for _, l := range levels {
			for _, k := range l.idx {
				s := max(l.sd, floor)
				w[k] = 1 / (s * s)
			}
		}
		fit, err = FitCurve(x, y, w, co)
		if err == nil && fit.Outcome == Converged {
			setLevelFits(levels, fit)
			th, ok := thetaFromReplicates(levels)
			cd.Theta = th
			cd.ThetaMethod = "1/s²: each calibrator weighted by 1/(its level's SD)²; an unknown by σ²·|ŷ|^(2θ) with θ the slope of ln s on ln|ŷ| over the levels (least squares, θ clamped to [0, 2])"
			if !ok {
				cd.ThetaMethod = "1/s²: each calibrator weighted by 1/(its level's SD)²; θ could not be estimated (fewer than 3 levels with a non-zero SD), an unknown is weighted as θ = 0"
			}
		}
	case WeightVarPower:
		fit, err = FitCurve(x, y, nil, co)
		if err == nil && fit.Outcome == Converged {
			fit, cd.Theta, cd.ThetaIterations, cd.ThetaMethod, err = estimateTheta(x, y, w, levels, fit, co)
		}
	}
	if err != nil {
		return nil, err
	}
	cd.Fixed, cd.Start = fit.Fixed, fit.Start
	cd.Outcome, cd.Criterion, cd.Iterations = fit.Outcome.String(), fit.Criterion, fit.Iterations
	return buildCurveReport(points, pidx, x, y, levels, fit, cd, opt, sc), nil
}

// resolveCurveOptions validates opt for a non-linear model.
func resolveCurveOptions(opt Options) (Options, error) {
	if err := opt.Curve.Check(opt.Model); err != nil {
		return opt, err
	}
	if opt.Weighting == "" {
		opt.Weighting = WeightNone
	}
	if !slices.Contains(CurveWeightings(), opt.Weighting) {
		return opt, inputErr("options.weighting", "weighting %q is not offered for the non-linear model %s (none, 1/y^2, 1/s^2, power_of_mean)", opt.Weighting, opt.Model)
	}
	return opt, resolveConfidencePolicy(&opt)
}

// groupCurveLevels groups the fitted readings (pidx into points) by
// concentration, in increasing concentration.
// Their memory comes from sc.
func groupCurveLevels(points []Point, pidx []int, sc *scratch) []*curveLevel {
	// A calibration has few levels: a linear search finds each reading's,
	// from the last level found (replicates usually follow each other).
	// One backing array holds the levels and one their reading indices.
	ints := sc.i.take(3 * len(pidx))
	of, first := ints[:len(pidx)], ints[len(pidx):2*len(pidx)] // level of each reading; first reading of each level
	nl := 0
	for k, i := range pidx {
		x := points[i].X
		li := -1
		for j := nl - 1; j >= 0; j-- {
			if points[pidx[first[j]]].X == x {
				li = j
				break
			}
		}
		if li < 0 {
			li, first[nl] = nl, k
			nl++
		}
		of[k] = li
	}
	store := sc.levels.take(nl)
	for j := range store {
		p := points[pidx[first[j]]]
		store[j] = curveLevel{label: p.Level, x: p.X, anchor: isAnchor(p.Level)}
	}
	count := first[:nl]
	clear(count)
	for _, li := range of {
		count[li]++
	}
	idx := ints[2*len(pidx):]
	out := sc.ptrs.take(len(store))
	at := 0
	for j := range store {
		n := count[j]
		store[j].idx = idx[at : at : at+n]
		at += n
		out[j] = &store[j]
	}
	for k, li := range of {
		store[li].idx = append(store[li].idx, k)
	}
	slices.SortFunc(out, func(a, b *curveLevel) int { return cmp.Compare(a.x, b.x) })
	for _, l := range out {
		var s, ss float64
		for _, k := range l.idx {
			s += points[pidx[k]].Y
		}
		l.meanY = s / float64(len(l.idx))
		for _, k := range l.idx {
			d := points[pidx[k]].Y - l.meanY
			ss += d * d
		}
		if len(l.idx) > 1 {
			l.sd, l.hasSD = math.Sqrt(ss/float64(len(l.idx)-1)), true
		}
	}
	return out
}

// isAnchor reports whether a level label starts with AnchorPrefix, in any
// case.
func isAnchor(label string) bool {
	return len(label) >= len(AnchorPrefix) && strings.EqualFold(label[:len(AnchorPrefix)], AnchorPrefix)
}

// setLevelFits sets each level's mean fitted response.
func setLevelFits(levels []*curveLevel, f *CurveFit) {
	c := curveOf(f.Model)
	for _, l := range levels {
		l.meanYHat = c.Eval(l.x, f.Coefficients, nil)
	}
}

// thetaFromReplicates returns the least-squares slope of ln s on ln|ŷ| over
// the levels with a non-zero replicate SD, clamped to [0, 2]; ok is false
// with fewer than three such levels or no spread in ln|ŷ|.
func thetaFromReplicates(levels []*curveLevel) (float64, bool) {
	var u, v []float64
	for _, l := range levels {
		if l.hasSD && l.sd > 0 && l.meanYHat != 0 && Finite(l.meanYHat) {
			u, v = append(u, math.Log(math.Abs(l.meanYHat))), append(v, math.Log(l.sd))
		}
	}
	if len(u) < 3 {
		return 0, false
	}
	_, b1, ok := lineFit(u, v)
	if !ok || !Finite(b1) {
		return 0, false
	}
	return min(max(b1, 0), 2), true
}

// estimateTheta iterates fit and weights for power_of_mean: from the
// unweighted fit, θ is the slope of ln(level SD) on ln|ŷ(level)|
// (thetaFromReplicates), every reading is weighted 1/max(|ŷᵢ|, floor)^(2θ),
// the curve is refitted from the previous coefficients, and so on until θ
// moves by less than 1e-4 (at most 20 rounds). The level SDs are the
// replicates' own and do not change; the fitted means do.
func estimateTheta(x, y, w []float64, levels []*curveLevel, fit *CurveFit, co CurveOptions) (*CurveFit, float64, int, string, error) {
	c := curveOf(co.Model)
	theta, rounds := 0.0, 0
	const how = "power_of_mean: Var(y) = σ²·|ŷ|^(2θ); θ is the least-squares slope of ln(level SD) on ln|ŷ| over the calibrator levels with replicates (clamped to [0, 2]), iterated with a weighted refit until θ moves by less than 1e-4"
	for rounds < 20 {
		setLevelFits(levels, fit)
		th, ok := thetaFromReplicates(levels)
		if !ok {
			return fit, 0, rounds, "power_of_mean: θ could not be estimated (fewer than 3 levels with replicates and a non-zero SD); the fit is unweighted, θ = 0", nil
		}
		rounds++
		floor := responseFloor(x, fit)
		for i := range x {
			w[i] = math.Pow(max(math.Abs(c.Eval(x[i], fit.Coefficients, nil)), floor), -2*th)
		}
		nf, err := FitCurve(x, y, w, CurveOptions{Model: co.Model, Start: fit.Coefficients, Fixed: co.Fixed})
		if err != nil {
			return nil, 0, rounds, how, err
		}
		if nf.Outcome != Converged {
			return nf, th, rounds, how + " (the weighted refit did not converge)", nil
		}
		fit = nf
		if math.Abs(th-theta) < 1e-4 {
			theta = th
			break
		}
		theta = th
	}
	return fit, theta, rounds, how, nil
}

// responseFloor is the smallest non-zero |ŷ| at the calibrators (1 when all
// are zero).
func responseFloor(x []float64, fit *CurveFit) float64 {
	c := curveOf(fit.Model)
	return floorOf(len(x), func(i int) float64 { return c.Eval(x[i], fit.Coefficients, nil) })
}

// floorOf is the smallest non-zero |f(i)| over i < n, 1 when all are zero.
func floorOf(n int, f func(int) float64) float64 {
	fl := math.Inf(1)
	for i := range n {
		if a := math.Abs(f(i)); a > 0 {
			fl = min(fl, a)
		}
	}
	if math.IsInf(fl, 1) {
		return 1
	}
	return fl
}

// buildCurveReport assembles the Report of a non-linear fit.
// Its temporaries come from sc; the Report refers to none of them.
func buildCurveReport(points []Point, pidx []int, x, y []float64, levels []*curveLevel, fit *CurveFit, cd *CurveDetails, opt Options, sc *scratch) *Report {
	c := curveOf(fit.Model)
	r := &Report{Model: fit.Model, Weighting: opt.Weighting, WeightingRequested: opt.Weighting,
		WeightConvention: weightConvention(len(x)), WeightScale: fit.WeightScale,
		Coefficients: fit.Coefficients, StandardErrors: fit.StandardErrors, Covariance: fit.Covariance,
		ResidualSD: fit.ResidualSD, DF: fit.DF, N: fit.N, Confidence: opt.Confidence,
		Cautions: fit.Cautions, Engine: EngineVersion, Curve: cd, // the fit's own copy: the fit is this report's alone
		ZeroHandling: "responses near zero are weighted as the smallest non-zero |fitted response| (response_floor)",
		Limits:       Limits{Detail: "not computed: the ICH Q2 slope formulas assume a straight line; the precision profile's working range takes their place for non-linear curves"},
	}
	judged := sc.ptrs.take(len(levels))[:0]
	for _, l := range levels {
		if !l.anchor && l.x > 0 {
			judged = append(judged, l)
		}
	}
	if len(judged) > 0 {
		r.Range = Range{Low: judged[0].x, High: judged[len(judged)-1].x}
	}
	xs := sc.f.take(len(levels))[:0]
	for _, l := range levels {
		xs = append(xs, l.x)
	}
	r.Levels = len(levels)
	r.Points = make([]PointResult, len(points))
	ok := fit.Outcome == Converged
	// The gradient at each reading, kept from the fitted value's evaluation
	// for the leverages below.
	np := len(fit.Coefficients)
	withLev := ok && fit.Covariance != nil && fit.ResidualSD > 0
	var grads []float64
	if withLev {
		grads = sc.f.take(len(points) * np)
	}
	for i, p := range points {
		pr := &r.Points[i]
		pr.Level, pr.X, pr.Y, pr.Excluded = p.Level, p.X, p.Y, p.Excluded
		if ok {
			var g []float64
			if withLev {
				g = grads[i*np : i*np+np]
			}
			if i > 0 && p.X == points[i-1].X {
				// A replicate of the reading before: the same curve.
				pr.Fitted = r.Points[i-1].Fitted
				if withLev {
					copy(g, grads[(i-1)*np:i*np])
				}
			} else {
				pr.Fitted = c.Eval(p.X, fit.Coefficients, g)
			}
			pr.Residual = p.Y - pr.Fitted
			if xb, _, inv := c.invert(p.Y, fit.Coefficients); inv && Finite(xb) {
				pr.BackCalculated, pr.HasBackCalc = xb, true
				if p.X != 0 {
					pr.RelativeErrorPct, pr.HasRelativeError = 100*(xb-p.X)/p.X, true
				}
			}
		}
	}
	if ok {
		// A level's fitted response is that of its readings (the same x).
		for _, l := range levels {
			l.meanYHat = r.Points[pidx[l.idx[0]]].Fitted
		}
		cd.ResponseFloor = floorOf(len(pidx), func(k int) float64 { return r.Points[pidx[k]].Fitted })
	} else {
		setLevelFits(levels, fit)
		cd.ResponseFloor = responseFloor(x, fit)
	}
	for k, i := range pidx {
		wk := 1.0
		if len(fit.Residuals) == len(pidx) {
			fx := math.NaN()
			if ok {
				fx = r.Points[i].Fitted
			}
			wk = fit.WeightScale * r.rawWeightAt(points[i].X, y[k], fx)
		}
		r.Points[i].Weight = wk
		r.Points[i].WeightedResidual = math.Sqrt(wk) * r.Points[i].Residual
	}
	if withLev {
		// Leverage hᵢ = wᵢ·gᵢᵀ(JᵀWJ)⁻¹gᵢ (the hat matrix of the linearised
		// model at the solution, Cov = s²(JᵀWJ)⁻¹) and the internally
		// studentised residual √wᵢ·rᵢ/(s·√(1 − hᵢ)), as for the line.
		s2 := fit.ResidualSD * fit.ResidualSD
		for _, i := range pidx {
			pr := &r.Points[i]
			h := quadForm(fit.Covariance, grads[i*np:i*np+np])
			pr.Leverage = pr.Weight * h / s2
			if 1-pr.Leverage > 1e-10 {
				pr.Studentized = pr.WeightedResidual / (fit.ResidualSD * math.Sqrt(1-pr.Leverage))
			}
		}
	}
	// Weighted R² on the Σw = n scale.
	var mw, sst float64
	for k := range pidx {
		mw += r.Points[pidx[k]].Weight * y[k]
	}
	mw /= float64(len(pidx))
	for k := range pidx {
		d := y[k] - mw
		sst += r.Points[pidx[k]].Weight * d * d
	}
	if sst > 0 && ok {
		r.RSquared = max(0, 1-fit.SSR/sst)
	}
	t := newText()
	defer t.free()
	mc := minLevelsCheck(xs, opt.Policy, t)
	mc.Detail, mc.Mandatory = t.str(), opt.Policy.mandatory(CheckMinLevels)
	r.Checks = append(make([]Check, 0, 6), convergenceCheck(fit), mc)
	if ok {
		cd.Replicates = medianReplicates(judged)
		r.profile(judged, cd)
		r.Checks = append(r.Checks,
			curveBackCalcCheck(judged, c, fit.Coefficients, opt.Policy),
			curveMonotonicCheck(judged, c, fit.Coefficients, opt.Policy),
			curveLackOfFitCheck(levels, points, pidx, r, fit, opt.Policy),
			r.profileCheck(judged, cd))
	} else {
		for _, name := range []string{CheckBackCalculation, CheckMonotonic, CheckLackOfFit, CheckPrecisionProfile} {
			r.Checks = append(r.Checks, Check{Name: name, Source: curveCheckSource(name), Mandatory: curveMandatory(name, opt.Policy),
				Detail: "Not computed: the solver did not converge (" + fit.Outcome.String() + ")."})
		}
	}
	r.Verdict = verdict(r.Checks)
	if !r.finite() {
		// Defensive: a fit that produced non-finite numbers is reported
		// as not converged rather than stored with NaN.
		return FailedReport(points, Options{Model: opt.Model, Weighting: opt.Weighting, Confidence: opt.Confidence, Policy: opt.Policy},
			inputErr("points", "the fit produced values outside the numerically usable range"))
	}
	return r
}

// curveMandatory: the solver's outcome always decides; the others follow the
// policy's list (back_calculation and monotonic are mandatory by default);
// the precision profile is advisory.
func curveMandatory(name string, pol Policy) bool {
	switch name {
	case CheckConvergence:
		return true
	case CheckPrecisionProfile:
		return false
	}
	return pol.mandatory(name)
}

// curveCheckSource names the source of each non-linear check.
func curveCheckSource(name string) string {
	switch name {
	case CheckConvergence:
		return "Levenberg–Marquardt convergence criteria (Moré 1978; MINPACK lmder): a fit that did not converge gives no curve (common practice)"
	case CheckBackCalculation:
		return "ICH M10 (2022) ligand-binding assays: back-calculated calibrators within ±20 % (±25 % at LLOQ and ULOQ), at least 75 % and at least 6 levels passing, anchors not judged"
	case CheckMonotonic:
		return "A calibration curve must be strictly monotonic over its range to give one concentration per response (common practice)"
	case CheckLackOfFit:
		return "Lack-of-fit F-test with pure error from replicates (Montgomery, Design and Analysis of Experiments), weighted, p = free coefficients"
	case CheckPrecisionProfile:
		return "Precision profile: CV of the back-calculated concentration against concentration; working range where CV ≤ 20 % (common practice for immunoassay functional sensitivity)"
	}
	return ""
}

func convergenceCheck(f *CurveFit) Check {
	c := Check{Name: CheckConvergence, Computed: true, Passed: f.Outcome == Converged, Mandatory: true,
		Source: curveCheckSource(CheckConvergence), Statistic: float64(f.Iterations)}
	c.Detail = "The solver ended " + f.Outcome.String() + " after " + itoa(f.Iterations) + " iteration(s): " + f.Criterion + "."
	return c
}

func medianReplicates(levels []*curveLevel) int {
	if len(levels) == 0 {
		return 1
	}
	var buf [16]int
	n := buf[:0]
	if len(levels) > len(buf) {
		n = make([]int, 0, len(levels))
	}
	for _, l := range levels {
		n = append(n, len(l.idx))
	}
	slices.Sort(n)
	return max(1, n[len(n)/2])
}

// curveBackCalcCheck judges each non-anchor calibrator level by the
// concentration read back from its mean response (duplicate wells are
// averaged, common practice for plate assays).
func curveBackCalcCheck(levels []*curveLevel, c calibCurve, beta []float64, pol Policy) Check {
	ck := Check{Name: CheckBackCalculation, Source: curveCheckSource(CheckBackCalculation), Mandatory: pol.mandatory(CheckBackCalculation),
		Limit: pol.BackCalcMinPassFraction}
	t := newText()
	defer t.free()
	pass := 0
	for i, l := range levels {
		tol := float64(CurveBackCalcTolerancePct)
		if i == 0 || i == len(levels)-1 {
			tol = CurveBackCalcEndTolerancePct
		}
		xb, flag, ok := c.invert(l.meanY, beta)
		if !ok {
			t.s(l.label).s(": no back-calculated value (").s(flag).s("). ")
			continue
		}
		re := 100 * (xb - l.x) / l.x
		if math.Abs(re) <= tol {
			pass++
		} else {
			t.s(l.label).s(" (x = ").g(l.x).s("): ").g(re).s(" % outside ±").g(tol).s(" %. ")
		}
	}
	if len(levels) == 0 {
		ck.Detail = "Not computed: no non-anchor calibrator level with a non-zero concentration."
		return ck
	}
	frac := float64(pass) / float64(len(levels))
	ck.Computed, ck.Statistic = true, frac
	ck.Passed = frac >= pol.BackCalcMinPassFraction && pass >= 6
	t.i(pass).s(" of ").i(len(levels)).s(" calibrator level(s) within tolerance (at least ").g(100 * pol.BackCalcMinPassFraction).
		s(" % and 6 levels needed); anchors are not judged.")
	ck.Detail = t.str()
	return ck
}

// curveMonotonicCheck: the fitted responses at the calibrator levels change
// strictly in one direction, each step by more than 1e-9 of the curve's
// span over the range.
func curveMonotonicCheck(levels []*curveLevel, c calibCurve, beta []float64, pol Policy) Check {
	ck := Check{Name: CheckMonotonic, Source: curveCheckSource(CheckMonotonic), Mandatory: pol.mandatory(CheckMonotonic), Computed: true}
	if len(levels) < 2 {
		ck.Computed, ck.Detail = false, "Not computed: fewer than two calibrator levels."
		return ck
	}
	span := math.Abs(levels[len(levels)-1].meanYHat - levels[0].meanYHat)
	dir := math.Copysign(1, levels[len(levels)-1].meanYHat-levels[0].meanYHat)
	flat := 0
	for i := 1; i < len(levels); i++ {
		if dir*(levels[i].meanYHat-levels[i-1].meanYHat) <= 1e-9*span {
			flat++
		}
	}
	ck.Statistic = float64(flat)
	ck.Passed = flat == 0 && span > 0
	if ck.Passed {
		ck.Detail = "The fitted curve changes strictly in one direction between every pair of adjacent calibrator levels."
	} else {
		ck.Detail = itoa(flat) + " step(s) between adjacent calibrator levels where the fitted curve does not change (it sits on an asymptote)."
	}
	return ck
}

// curveLackOfFitCheck: F = (SS_lof/(k − p))/(SS_pe/(n − k)) with weighted
// sums on the Σw = n scale; passes when P(F) ≥ LackOfFitAlpha.
func curveLackOfFitCheck(levels []*curveLevel, points []Point, pidx []int, r *Report, fit *CurveFit, pol Policy) Check {
	ck := Check{Name: CheckLackOfFit, Source: curveCheckSource(CheckLackOfFit), Mandatory: pol.mandatory(CheckLackOfFit), Limit: pol.LackOfFitAlpha}
	n, k := len(pidx), len(levels)
	p := 0
	for _, f := range fit.Fixed {
		if !f {
			p++
		}
	}
	var sspe float64
	for _, l := range levels {
		var sw, swy float64
		for _, j := range l.idx {
			w := r.Points[pidx[j]].Weight
			sw += w
			swy += w * points[pidx[j]].Y
		}
		m := swy / sw
		for _, j := range l.idx {
			d := points[pidx[j]].Y - m
			sspe += r.Points[pidx[j]].Weight * d * d
		}
	}
	if n-k < 1 || k-p < 1 || !(sspe > 0) {
		ck.Detail = "Not computed: needs replicates (n > levels), more levels than coefficients and some pure error."
		return ck
	}
	sslof := max(fit.SSR-sspe, 0)
	f := (sslof / float64(k-p)) / (sspe / float64(n-k))
	pv := 1 - distuv.F{D1: float64(k - p), D2: float64(n - k)}.CDF(f)
	ck.Computed, ck.Statistic, ck.Passed = true, pv, pv >= pol.LackOfFitAlpha
	t := newText()
	t.s("F = ").g(f).s(" on ").i(k - p).s(" and ").i(n - k).s(" degrees of freedom, p = ").g(pv).s(".")
	ck.Detail = t.str()
	t.free()
	return ck
}

// rawWeightAt is the raw weight of a reading (or unknown) at concentration x
// with response y under the report's weighting, before WeightScale:
// 1/max(|ŷ(x)|, floor)^(2θ) for power_of_mean and 1/s² (θ from the
// levels), 1/y² for 1/y² calibrators and 1 unweighted. For 1/s² the
// calibrators' own weights come from their level SDs; this is the weight
// of an unknown.
// fx is f(x) when known, NaN to evaluate the curve.
func (r *Report) rawWeightAt(x, y, fx float64) float64 {
	cd := r.Curve
	switch r.Weighting {
	case WeightInvY2:
		if y != 0 {
			return 1 / (y * y)
		}
		return 1 / (cd.ResponseFloor * cd.ResponseFloor)
	case WeightVarPower, WeightInvS2:
		if math.IsNaN(fx) {
			fx = curveOf(r.Model).Eval(x, r.Coefficients, nil)
		}
		return math.Pow(max(math.Abs(fx), cd.ResponseFloor), -2*cd.Theta)
	}
	return 1
}

// curveVar is the variance of the mean of m readings of an unknown on the
// curve at x, s²/(m·w0(x)), plus the variance of the fitted curve there,
// ∇βfᵀ·Cov·∇βf (see at), for one report at many x (the precision profile,
// the band inversion): what depends only on the report (the covariance as
// one array, s², the weight scale, ln c) is taken once.
type curveVar struct {
	r        *Report
	c        calibCurve
	beta     []float64
	logistic bool // c is a logistic, evaluated from ln(x/c)
	five     bool
	s2m      float64 // s²/m: s² over the readings per unknown
	invWS    float64 // 1/(WeightScale·s2Norm) (s2Norm with 1/s² weights, else 1): turns 1/raw weight into 1/w0
	floor2   float64 // the response floor squared (1/y² weights at a zero response)
	lnc      float64 // ln c of a logistic
	bc       float64 // b/c of a logistic
	cov      [25]float64
	grad     []float64 // ∇βf of a curve that is not a logistic
}

// newCurveVar prepares curveVar for m readings of an unknown.
func (r *Report) newCurveVar(c calibCurve, m int) curveVar {
	p := len(r.Coefficients)
	cv := curveVar{r: r, c: c, beta: r.Coefficients, s2m: r.ResidualSD * r.ResidualSD / float64(m), invWS: 1 / r.WeightScale}
	if l, ok := c.(logistic); ok && r.Coefficients[2] > 0 {
		cv.logistic, cv.five, cv.lnc = true, l.five, math.Log(r.Coefficients[2])
		cv.bc = r.Coefficients[1] / r.Coefficients[2]
	} else {
		cv.grad = make([]float64, p)
	}
	if r.Weighting == WeightInvS2 {
		// Level SDs set the calibrators' scale; the unknown's weight
		// follows the θ model normalised like them.
		cv.invWS = 1 / (r.WeightScale * r.s2Norm())
	}
	if r.Curve != nil {
		cv.floor2 = r.Curve.ResponseFloor * r.Curve.ResponseFloor
	}
	for j := range p {
		copy(cv.cov[j*p:j*p+p], r.Covariance[j][:p])
	}
	return cv
}

// at returns f(x), the variance and the slope f′(x) (from the same
// evaluation of the curve).
func (cv *curveVar) at(x float64) (fx, v, slope float64) {
	if cv.logistic && x > 0 {
		return cv.atU(logU(x, cv.beta[2]), x)
	}
	fx, slope = cv.c.evalSlope(x, cv.beta, cv.grad)
	return fx, cv.varAt(fx, cv.grad), slope
}

// atU is at for a logistic at x > 0 given u = ln(x/c).
func (cv *curveVar) atU(u, x float64) (fx, v, slope float64) {
	fx, v, hl := cv.atLogU(u)
	return fx, v, cv.slopeOf(hl, x)
}

// atLogU is f and the variance of a logistic at x > 0 given u = ln(x/c)
// alone (x itself enters only the slope), and h·L, from which slopeOf
// gives the slope.
func (cv *curveVar) atLogU(u float64) (fx, v, hl float64) {
	if !cv.five {
		h, lg, _ := core4(cv.beta[1] * u)
		fx, v = cv.fv4(h, lg, u)
		return fx, v, h * lg
	}
	l := logistic{five: true}
	var ga [5]float64
	g := ga[:l.NumParams()]
	fx, hl = l.evalU(u, cv.beta, g)
	return fx, cv.varAt(fx, g), hl
}

// slopeOf is a logistic's slope f′(x) = −(a − d)·g·h·L·b/x given hl = h·L.
func (cv *curveVar) slopeOf(hl, x float64) float64 {
	return cv.slopeLn(hl) / x
}

// slopeLn is a logistic's slope in ln x, x·f′(x) = −(a − d)·g·h·L·b, given
// hl = h·L.
func (cv *curveVar) slopeLn(hl float64) float64 {
	g := 1.0
	if cv.five {
		g = cv.beta[4]
	}
	return -(cv.beta[0] - cv.beta[3]) * g * hl * cv.beta[1]
}

// profile4 is the precision profile of the 4PL over a grid even in ln x,
// with fv4, varAt and slopeLn written out for its inner loop: point i has
// x = x1·xq^i, e^(b·ln(x/c)) = e1·eq^i and ln(x/c) = u1 + i·du; it sets
// xs[i] = x and cvs[i] = 100·√v/|df/d ln x|, the CV in %, with the
// covariance's symmetry used (10 products instead of 16).
func (cv *curveVar) profile4(xs, cvs []float64, x1, xq, e1, eq, u1, du float64) {
	a, b, d := cv.beta[0], cv.beta[1], cv.beta[3]
	m, bc := a-d, cv.bc
	c := (*[16]float64)(cv.cov[:16])
	c00, c01, c02, c03 := c[0], c[1], c[2], c[3]
	c11, c12, c13 := c[5], c[6], c[7]
	c22, c23, c33 := c[10], c[11], c[15]
	cvs = cvs[:len(xs)]
	x, e := x1, e1
	for i := range xs {
		u := u1 + du*float64(i)
		h := 1 / (1 + e)
		lg := e * h
		hl := h * lg
		k := m * hl
		g0, g1, g2, g3 := h, -k*u, k*bc, lg
		v := cv.s2m*cv.invWeight(d+m*h) +
			c00*g0*g0 + c11*g1*g1 + c22*g2*g2 + c33*g3*g3 +
			2*(c01*g0*g1+c02*g0*g2+c03*g0*g3+c12*g1*g2+c13*g1*g3+c23*g2*g3)
		xs[i], cvs[i] = x, 100*math.Sqrt(v)/math.Abs(m*b*hl)
		x, e = x*xq, e*eq
	}
}

// fv4 is f and the variance of the 4PL given h = 1/(1 + eᵗ) and L = 1 − h
// at t = b·u (evalU with g = 1 written out).
func (cv *curveVar) fv4(h, lg, u float64) (fx, v float64) {
	a, d := cv.beta[0], cv.beta[3]
	k := (a - d) * h * lg
	g := [4]float64{h, -k * u, k * cv.bc, lg}
	fx = d + (a-d)*h
	return fx, cv.varAt(fx, g[:])
}

// varAt is the variance given fx = f(x) and g = ∇βf(x) (the weight of an
// unknown depends on x only through f(x); a NaN fx gives a NaN variance).
func (cv *curveVar) varAt(fx float64, g []float64) float64 {
	v := cv.s2m * cv.invWeight(fx)
	p := len(g)
	if p == 4 {
		// The 4PL written out (the same sums in the same order).
		c, g := (*[16]float64)(cv.cov[:16]), (*[4]float64)(g)
		for j := range 4 {
			s := c[4*j]*g[0] + c[4*j+1]*g[1] + c[4*j+2]*g[2] + c[4*j+3]*g[3]
			v += g[j] * s
		}
		return v
	}
	cov := cv.cov[:p*p]
	for j, gj := range g {
		row := cov[j*p : j*p+p]
		var s float64
		for k, gk := range g {
			s += row[k] * gk
		}
		v += gj * s
	}
	return v
}

// invWeight is 1/w0, the inverse of the weight (on the calibrators'
// scale) of an unknown whose fitted response is fx: rawWeightAt inverted
// (the same rules, with no division).
func (cv *curveVar) invWeight(fx float64) float64 {
	switch cv.r.Weighting {
	case WeightInvY2:
		if fx != 0 {
			return fx * fx * cv.invWS
		}
		return cv.floor2 * cv.invWS
	case WeightVarPower, WeightInvS2:
		if math.IsNaN(fx) {
			return fx
		}
		return math.Pow(max(math.Abs(fx), cv.r.Curve.ResponseFloor), 2*cv.r.Curve.Theta) * cv.invWS
	}
	return cv.invWS
}

// quadForm is gᵀ·C·g.
func quadForm(c [][]float64, g []float64) float64 {
	var v float64
	for j, gj := range g {
		row := c[j][:len(g)]
		var s float64
		for k, gk := range g {
			s += row[k] * gk
		}
		v += gj * s
	}
	return v
}

// s2Norm brings the θ model's raw weights to the calibrators' 1/s² scale:
// the mean over the fitted readings of (their 1/s² weight)/(the θ model's
// weight at them).
func (r *Report) s2Norm() float64 {
	c := curveOf(r.Model)
	var s float64
	n := 0
	for _, p := range r.Points {
		if p.Excluded || p.Weight == 0 {
			continue
		}
		rw := math.Pow(max(math.Abs(c.Eval(p.X, r.Coefficients, nil)), r.Curve.ResponseFloor), -2*r.Curve.Theta)
		s += p.Weight / r.WeightScale / rw
		n++
	}
	if n == 0 || !(s > 0) {
		return 1
	}
	return s / float64(n)
}

// profile fills the precision profile: the delta-method CV of x̂0 from the
// mean of Replicates readings at 33 concentrations spaced evenly in log x
// over the calibrated range, and the widest run where CV ≤ the limit.
func (r *Report) profile(levels []*curveLevel, cd *CurveDetails) {
	if len(levels) < 2 || r.Range.Low <= 0 {
		return
	}
	cv := r.newCurveVar(curveOf(r.Model), cd.Replicates)
	const n = 33
	lo, hi := math.Log(r.Range.Low), math.Log(r.Range.High)
	cd.Profile = make([]ProfilePoint, n)
	bestA, bestB, a := -1, -1, -1
	// For the 4PL the grid's x and e^(b·ln(x/c)) are geometric sequences:
	// each point multiplies the one before by e^Δ and e^(b·Δ) (Δ the step
	// in ln x) instead of evaluating two exponentials. The products drift
	// from the exact values by a few units in the last place over the 33
	// points, far below the precision of a CV. Used when e^(b·ln(x/c))
	// stays well inside the floating-point range at both ends.
	dt := (hi - lo) / float64(n-1)
	var xq, eq, xi, ei float64
	geo := cv.logistic && !cv.five
	if geo {
		b := cv.beta[1]
		ei, xi = math.Exp(b*(lo-cv.lnc)), r.Range.Low
		eEnd := math.Exp(b * (hi - cv.lnc))
		xq, eq = math.Exp(dt), math.Exp(b*dt)
		geo = min(ei, eEnd) > 1e-280 && max(ei, eEnd) < 1e280
	}
	// The CV is s(x̂0)/x = √v/|x·f′(x)|, and x·f′(x) = df/d ln x, which
	// for a logistic needs no x (slopeLn).
	var xs, cvs [n]float64
	if geo {
		cv.profile4(xs[:], cvs[:], xi, xq, ei, eq, lo-cv.lnc, dt)
		xs[n-1] = r.Range.High
	}
	for i := range n {
		var x, cvPct float64
		if geo {
			x, cvPct = xs[i], cvs[i]
		} else {
			t := lo + (hi-lo)*float64(i)/float64(n-1)
			x = math.Exp(t)
			if i == n-1 {
				x, t = r.Range.High, hi
			}
			if cv.logistic {
				// ln(x/c) = t − ln c: the grid is even in ln x.
				_, v, hl := cv.atLogU(t - cv.lnc)
				cvPct = 100 * math.Sqrt(v) / math.Abs(cv.slopeLn(hl))
			} else {
				_, v, sl := cv.at(x)
				cvPct = 100 * math.Sqrt(v) / math.Abs(x*sl)
			}
		}
		pp := ProfilePoint{X: x}
		if Finite(cvPct) {
			pp.CVPct, pp.OK = cvPct, true
		}
		cd.Profile[i] = pp
		if pp.OK && pp.CVPct <= cd.ProfileLimitPct {
			if a < 0 {
				a = i
			}
			if bestA < 0 || i-a > bestB-bestA {
				bestA, bestB = a, i
			}
		} else {
			a = -1
		}
	}
	if bestA >= 0 {
		cd.WorkingRange = Range{Low: cd.Profile[bestA].X, High: cd.Profile[bestB].X}
		cd.HasWorkingRange = true
	}
}

// profileCheck passes when the working range covers every calibrated level
// (the CV stays ≤ the limit from the LLOQ to the ULOQ).
func (r *Report) profileCheck(levels []*curveLevel, cd *CurveDetails) Check {
	ck := Check{Name: CheckPrecisionProfile, Source: curveCheckSource(CheckPrecisionProfile), Limit: cd.ProfileLimitPct}
	if len(cd.Profile) == 0 {
		ck.Detail = "Not computed: fewer than two calibrator levels with a non-zero concentration."
		return ck
	}
	worst := 0.0
	for _, p := range cd.Profile {
		if !p.OK {
			worst = math.Inf(1)
			break
		}
		worst = max(worst, p.CVPct)
	}
	ck.Computed = true
	t := newText()
	defer t.free()
	if math.IsInf(worst, 1) {
		ck.Statistic = 0
		t.s("The CV has no finite value somewhere in the calibrated range (the curve is flat there). ")
	} else {
		ck.Statistic = worst
		ck.Passed = worst <= cd.ProfileLimitPct
		t.s("Largest CV of the back-calculated concentration over the calibrated range: ").g(worst).s(" % (").i(cd.Replicates).s(" reading(s) per unknown). ")
	}
	if cd.HasWorkingRange {
		t.s("Working range where CV ≤ ").g(cd.ProfileLimitPct).s(" %: ").g(cd.WorkingRange.Low).s(" to ").g(cd.WorkingRange.High).s(".")
	} else {
		t.s("No part of the calibrated range has CV ≤ ").g(cd.ProfileLimitPct).s(" %.")
	}
	ck.Detail = t.str()
	return ck
}
