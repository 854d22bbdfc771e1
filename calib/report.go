package calib

import (
	"math"
	"strconv"
	"sync"
	"sync/atomic"
)

// cautionTexts are carried by every Report and every Prediction.
var cautionTexts = [...]string{
	"Acceptance is computed against the configured criteria; unless the laboratory configured its own, these are defaults drawn from published guidance (ICH M10, ICH Q2(R2), ISO 8466-1, ISO 11843-2, US EPA SW-846 Method 8000D).",
	"The laboratory's accreditation, its regulator and its method SOP take precedence over these criteria and over any result computed here.",
	"Results need review by a qualified person before they are released.",
}

var cautions = cautionTexts[:]

// Cautions returns the cautions that accompany every fit and every reported
// concentration. The slice is a fresh copy.
func Cautions() []string {
	c := make([]string, len(cautions))
	copy(c, cautions)
	return c
}

// weightConvention returns the Report's WeightConvention for n readings;
// the texts of short runs are kept, as the same n recurs run after run.
func weightConvention(n int) string {
	if n < len(conventions) {
		if s := conventions[n].Load(); s != nil {
			return *s
		}
	}
	s := "weights normalised to sum to n = " + strconv.Itoa(n) +
		" (Σw = n) before residual_sd is computed (Miller & Miller §5.10); an unknown's weight w0 is the scheme's raw weight times weight_scale, on the same scale"
	if n < len(conventions) {
		conventions[n].Store(&s)
	}
	return s
}

var conventions [128]atomic.Pointer[string]

// build fits the dataset with the given raw weights (normalised here to
// Σw = n) and assembles the full Report: coefficients, diagnostics, checks,
// limits and verdict. planRaw are the raw weights the plan itself gives the
// same readings; the ratio of the normalised weights to them is WeightScale,
// which turns the plan's raw weight of an unknown into w0.
func build(points []Point, d *dataset, opt Options, wp weightPlan, planRaw, raw []float64, scores []WeightScore) (*Report, error) {
	ratio := raw[0] / planRaw[0] // raw and planRaw may be the same slice
	w := raw
	wscale := normalise(w) * ratio
	var des design
	f, err := fitDesign(&des, opt.Model, d, w)
	if err != nil {
		return nil, err
	}
	n, p := len(d.x), f.p
	m := new(reportMem)
	r := &m.r
	*r = Report{
		Model:              opt.Model,
		Weighting:          wp.scheme,
		WeightingRequested: opt.Weighting,
		WeightCandidates:   scores,
		WeightConvention:   weightConvention(n),
		WeightScale:        wscale,
		WeightFloor:        wp.floor,
		Variance:           wp.vm,
		ResidualSD:         f.s,
		DF:                 f.df,
		RSquared:           f.r2,
		N:                  n,
		Levels:             len(d.levels),
		Confidence:         opt.Confidence,
		Range:              workingRange(d.levels),
		Engine:             EngineVersion,
	}
	r.weightFacts(d, w, wp)
	m.cautions = cautionTexts
	r.Cautions = m.cautions[:]
	r.Coefficients = m.coef[:p:p]
	copy(r.Coefficients, f.beta)
	r.StandardErrors = m.se[:p:p]
	r.Covariance = m.covRows[:p:p]
	s2 := f.s * f.s
	for j := 0; j < p; j++ {
		r.Covariance[j] = m.cov[j*p : (j+1)*p : (j+1)*p]
		for k := 0; k < p; k++ {
			r.Covariance[j][k] = s2 * f.xtwx[j*p+k]
		}
		r.StandardErrors[j] = math.Sqrt(r.Covariance[j][j])
	}
	var sw, swx, swy, swx2 float64
	for i := range d.x {
		sw += w[i]
		swx += w[i] * d.x[i]
		swy += w[i] * d.y[i]
		swx2 += w[i] * d.x[i] * d.x[i]
	}
	r.SumW, r.MeanXW, r.MeanYW, r.SumWX2 = sw, swx/sw, swy/sw, swx2
	for i := range d.x {
		dx := d.x[i] - r.MeanXW
		r.SxxW += w[i] * dx * dx
	}

	nf := fitNoise(d, opt.Model, f)
	r.Points = make([]PointResult, len(points))
	var v [3]float64
	for i, pt := range points {
		pr := &r.Points[i]
		pr.Level, pr.X, pr.Y, pr.Excluded = pt.Level, pt.X, pt.Y, pt.Excluded
		if pt.Excluded { // the fitted readings get the solution's values below
			basis(r.Model, pt.X, v[:])
			for j := 0; j < p; j++ {
				pr.Fitted += r.Coefficients[j] * v[j]
			}
			pr.Residual = pt.Y - pr.Fitted
		}
		r.backCalc(pr)
	}
	for k, i := range d.idx {
		pr := &r.Points[i]
		pr.Weight = w[k]
		pr.Fitted, pr.Residual = d.y[k]-f.resid[k], f.resid[k]
		pr.WeightedResidual = math.Sqrt(w[k]) * f.resid[k]
		pr.Leverage = f.lev[k]
		// An exact fit's residuals are rounding, which studentising would
		// blow up to the size of real ones: they stay 0.
		if !nf.exact && f.s > 0 && 1-f.lev[k] > 1e-10 {
			pr.Studentized = pr.WeightedResidual / (f.s * math.Sqrt(1-f.lev[k]))
			pr.CooksDistance = pr.Studentized * pr.Studentized * f.lev[k] / (float64(p) * (1 - f.lev[k]))
		}
	}
	dt := details{t: newText()}
	defer dt.t.free()
	start := len(dt.t.b)
	wp.zeroText(dt.t)
	dt.keep(&r.ZeroHandling, start, len(dt.t.b))
	start = len(dt.t.b)
	r.Limits = computeLimits(r, f, opt.Weights, dt.t)
	if len(dt.t.b) > start {
		dt.keep(&r.Limits.Detail, start, len(dt.t.b))
	}
	r.Checks = computeChecks(r, d, &des, f, w, nf, opt.Policy, m.checks[:0], &dt)
	dt.done()
	r.Verdict = verdict(r.Checks)
	if !r.finite() {
		return nil, inputErr("points", "values are outside the numerically usable range")
	}
	return r, nil
}

// reportMem is a Report together with the fixed-size storage its slices
// point to, so that build makes them in one allocation.
type reportMem struct {
	r        Report
	coef, se [3]float64
	cov      [9]float64
	covRows  [3][]float64
	checks   [len(checkNames)]Check
	cautions [len(cautionTexts)]string
}

// details builds the Detail texts of one report in one text and turns them
// into strings with a single allocation: a writer appends its text, keep
// records the field it belongs to and where it lies, and done sets every
// kept field to its part of one string.
type details struct {
	t     *text
	n     int
	field [16]*string
	span  [16][2]int
}

// keep records that t.b[a:b] is the text of *field.
func (d *details) keep(field *string, a, b int) {
	if d.n == len(d.field) {
		*field = string(d.t.b[a:b])
		return
	}
	d.field[d.n], d.span[d.n] = field, [2]int{a, b}
	d.n++
}

// done sets every kept field.
func (d *details) done() {
	s := string(d.t.b)
	for i := 0; i < d.n; i++ {
		*d.field[i] = s[d.span[i][0]:d.span[i][1]]
	}
}

// fitDesign factorises once for the model and, where the data allow, the
// line and the quadratic that Mandel's test and the intercept test compare
// (columns [1, x, x²], or [x, 1, x²] for the origin model), and fits the
// model from it. If the extra columns are not usable (x² overflows), the
// model's own columns are factorised and those checks are not computed.
func fitDesign(des *design, m Model, d *dataset, w []float64) (lsq, error) {
	n, k := len(d.x), len(d.levels)
	var ext []int
	switch {
	case m == Quadratic:
		ext = powers(m)
	case n >= 4 && k >= 3 && m == Linear:
		ext = []int{0, 1, 2}
	case n >= 4 && k >= 3:
		ext = []int{1, 0, 2}
	case n >= 3 && originLine(m):
		ext = []int{1, 0}
	default:
		ext = powers(m)
	}
	buf := d.take(designLen(n, len(ext)))
	err := des.init(ext, d.x, d.y, w, buf)
	if err != nil && len(ext) > nParams(m) {
		err = des.init(powers(m), d.x, d.y, w, buf)
	}
	if err != nil {
		return lsq{}, err
	}
	return des.fitInto(m, d.take(fitLen(nParams(m), n)))
}

// backCalc reads a point's concentration back from the curve and sets its
// %RE = 100·(x_back − x_nominal)/x_nominal (none for nominal 0).
func (r *Report) backCalc(pr *PointResult) {
	xb, _, ok := invertCurve(r.Model, r.Coefficients, r.Range.Low, r.Range.High, pr.Y)
	if !ok {
		return
	}
	pr.BackCalculated, pr.HasBackCalc = xb, true
	if pr.X != 0 {
		pr.RelativeErrorPct = 100 * (xb - pr.X) / pr.X
		pr.HasRelativeError = true
	}
}

// verdict is "fail" if any mandatory check failed or could not be computed.
func verdict(checks []Check) string {
	for _, c := range checks {
		if c.Mandatory && !c.Passed {
			return "fail"
		}
	}
	return "pass"
}

// FailedReport builds the Report of a run whose readings are valid numbers
// but which cannot be fitted (one level, all responses equal, too few
// levels or readings): Verdict "fail", the points listed without fitted
// values, min_levels computed from the points, every other check
// Computed = false with a Detail naming cause, the cautions, and no NaN or
// Inf anywhere (a non-finite reading is listed as 0 and said so). The service
// stores it with the raw data as evidence of the run.
func FailedReport(points []Point, opt Options, cause error) *Report {
	if ro, err := resolveOptions(opt); err == nil {
		opt = ro
	} else {
		if opt.Model == "" {
			opt.Model = Linear
		}
		if opt.Weighting == "" {
			opt.Weighting = WeightNone
		}
		if !(opt.Confidence > 0 && opt.Confidence < 1) {
			opt.Confidence = 0.95
		}
		if opt.Policy.validate() != nil {
			opt.Policy = DefaultPolicy()
		}
	}
	why := "the run could not be fitted"
	if cause != nil {
		why += ": " + cause.Error()
	}
	r := &Report{
		Model:              opt.Model,
		Weighting:          opt.Weighting,
		WeightingRequested: opt.Weighting,
		WeightConvention:   "no fit: no weights were computed",
		ZeroHandling:       "no fit: not applicable",
		Confidence:         opt.Confidence,
		Verdict:            "fail",
		Cautions:           Cautions(),
		Engine:             EngineVersion,
		Limits:             Limits{Detail: "not computed: " + why},
	}
	r.Points = make([]PointResult, len(points))
	lo, hi, have := 0.0, 0.0, false
	nonFinite := 0
	var xs []float64
	for i, pt := range points {
		x, y := pt.X, pt.Y
		if math.IsNaN(x) || math.IsInf(x, 0) {
			x, nonFinite = 0, nonFinite+1
		}
		if math.IsNaN(y) || math.IsInf(y, 0) {
			y, nonFinite = 0, nonFinite+1
		}
		r.Points[i] = PointResult{Level: pt.Level, X: x, Y: y, Excluded: pt.Excluded}
		if pt.Excluded || x != pt.X {
			continue
		}
		r.N++
		// The working range starts at the lowest non-zero standard (see
		// workingRange); with only blanks it is [0, 0].
		if x != 0 && (!have || x < lo) {
			lo = x
		}
		if x != 0 {
			have = true
		}
		hi = max(hi, x)
		seen := false
		for _, v := range xs {
			if v == x {
				seen = true
				break
			}
		}
		if !seen {
			xs = append(xs, x)
		}
	}
	r.Levels = len(xs)
	r.Range = Range{Low: lo, High: hi}
	if nonFinite > 0 {
		why += " (" + strconv.Itoa(nonFinite) + " non-finite value(s) are listed as 0)"
	}
	for _, name := range checkNames {
		c := Check{Name: name, Source: checkSource(name, opt.Model), Mandatory: opt.Policy.mandatory(name)}
		if name == CheckMinLevels {
			t := newText()
			c = minLevelsCheck(xs, opt.Policy, t)
			c.Detail = t.str()
			t.free()
			c.Mandatory = opt.Policy.mandatory(name)
		} else {
			c.Detail = "Not computed: " + why + "."
		}
		if c.Mandatory && !c.Passed && !c.Computed {
			c.Detail += mandatoryNote
		}
		r.Checks = append(r.Checks, c)
	}
	return r
}

// finite reports whether every float in the report is finite.
func (r *Report) finite() bool {
	if !Finite(r.ResidualSD, r.RSquared, r.Confidence, r.SumW, r.MeanXW, r.MeanYW, r.SxxW, r.SumWX2,
		r.WeightScale, r.WeightFloor, r.Variance.C0, r.Variance.C1, r.Variance.Floor, r.HeaviestLevel.Share,
		r.Limits.LOD, r.Limits.LOQ, r.Limits.Sigma, r.Limits.CriticalValue, r.Limits.CriticalConc, r.Limits.DetectionLimit,
		r.Range.Low, r.Range.High) {
		return false
	}
	if !Finite(r.Coefficients...) || !Finite(r.StandardErrors...) {
		return false
	}
	for _, row := range r.Covariance {
		if !Finite(row...) {
			return false
		}
	}
	for _, c := range r.WeightCandidates {
		if !Finite(c.SumAbsRE, c.MaxLevelShare) {
			return false
		}
	}
	// The points and checks, which are most of the numbers, are summed
	// in one pass without a slice per point (v − v is 0 for every finite v
	// and NaN otherwise, and a sum of zeros is 0).
	var s float64
	for i := range r.Points {
		p := &r.Points[i]
		s += (p.X - p.X) + (p.Y - p.Y) + (p.Weight - p.Weight) + (p.Fitted - p.Fitted) +
			(p.Residual - p.Residual) + (p.WeightedResidual - p.WeightedResidual) +
			(p.Leverage - p.Leverage) + (p.Studentized - p.Studentized) +
			(p.CooksDistance - p.CooksDistance) + (p.BackCalculated - p.BackCalculated) +
			(p.RelativeErrorPct - p.RelativeErrorPct)
	}
	for i := range r.Checks {
		c := &r.Checks[i]
		s += (c.Statistic - c.Statistic) + (c.Limit - c.Limit)
	}
	return s == 0
}

// finite reports whether every v is neither NaN nor ±Inf (v − v is NaN for
// both, 0 for every finite v).
func Finite(v ...float64) bool {
	var s float64
	for _, x := range v {
		s += x - x
	}
	return s == 0
}

// fmtG formats v with six significant digits for Detail texts.
func fmtG(v float64) string {
	return strconv.FormatFloat(v, 'g', 6, 64)
}

// itoa formats an integer for Detail texts.
func itoa(i int) string {
	return strconv.Itoa(i)
}

// text builds Detail texts with one allocation for the finished string
// rather than one per number and per concatenation.
type text struct{ b []byte }

// textPool recycles text buffers across checks and fits.
var textPool = sync.Pool{New: func() any { return &text{b: make([]byte, 0, 512)} }}

// newText returns an empty text from the pool; free returns it.
func newText() *text {
	t := textPool.Get().(*text)
	t.b = t.b[:0]
	return t
}

func (t *text) free() { textPool.Put(t) }

func (t *text) s(v string) *text { t.b = append(t.b, v...); return t }

// g appends v with six significant digits (as fmtG).
func (t *text) g(v float64) *text { t.b = strconv.AppendFloat(t.b, v, 'g', 6, 64); return t }

// g10 appends v with ten significant digits.
func (t *text) g10(v float64) *text { t.b = strconv.AppendFloat(t.b, v, 'g', 10, 64); return t }

// i appends v in decimal (as strconv.Itoa); the counts in the texts are
// mostly below 100, which take a short path.
func (t *text) i(v int) *text {
	if uint(v) < 100 {
		if v >= 10 {
			t.b = append(t.b, byte('0'+v/10))
		}
		t.b = append(t.b, byte('0'+v%10))
		return t
	}
	t.b = strconv.AppendInt(t.b, int64(v), 10)
	return t
}

// point names a reading for QA staff: its level label, index and x.
func (t *text) point(p *PointResult, i int) *text {
	if p.Level != "" {
		return t.s(p.Level).s(" (reading ").i(i).s(", x = ").g(p.X).s(")")
	}
	return t.s("reading ").i(i).s(" (x = ").g(p.X).s(")")
}

// add appends the text of u.
func (t *text) add(u *text) *text { t.b = append(t.b, u.b...); return t }

func (t *text) str() string { return string(t.b) }
