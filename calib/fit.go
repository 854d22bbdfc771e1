package calib

import (
	"errors"
	"math"
	"sort"
	"strconv"

	"gonum.org/v1/gonum/mat"
)

// dataset holds the fitted (non-excluded) readings and their levels.
type dataset struct {
	idx    []int // index in the caller's points of each fitted reading
	x, y   []float64
	levels []level // by increasing x
}

// level is one nominal concentration among the fitted readings.
type level struct {
	x     float64
	idx   []int // indices into dataset.x / dataset.y
	count int
	mean  float64 // unweighted mean response
	sd    float64 // sample SD of the responses, 0 for a single reading
}

// nParams returns p, the number of coefficients of the model.
func nParams(m Model) int {
	switch m {
	case LinearOrigin:
		return 1
	case Quadratic:
		return 3
	}
	return 2
}

// Fit fits the calibration curve y = f(x) of opt.Model to the non-excluded
// points by weighted least squares, β = argmin Σw(y − Xβ)², solved by the
// QR decomposition of √W·X (never the normal equations), and reports the
// coefficients, their covariance s²(XᵀWX)⁻¹, every reading's diagnostics,
// the acceptance checks of opt.Policy, the limits and the verdict.
//
// Preconditions (otherwise a *InputError naming the input): every x and y
// finite, x ≥ 0; at least p+1 fitted readings at two or more concentrations
// (three for the quadratic); responses not all equal; a known model and
// weighting; confidence in (0, 1). Zero values of Options select defaults:
// model linear, weighting none, confidence 0.95, DefaultPolicy.
//
// Every replicate is an observation. Weights are normalised to Σw = n
// (Miller & Miller, Statistics and Chemometrics for Analytical Chemistry
// §5.10); see planWeights for zero handling and WeightAuto for the choice
// among schemes (Almeida et al., J. Chromatogr. B 774 (2002) 215).
func Fit(points []Point, opt Options) (*Report, error) {
	opt, err := resolveOptions(opt)
	if err != nil {
		return nil, err
	}
	d, err := prepare(points, opt.Model)
	if err != nil {
		return nil, err
	}
	if opt.Weighting == WeightAuto {
		return fitAuto(points, d, opt)
	}
	wp, raw, err := planWeights(opt.Weighting, d)
	if err != nil {
		return nil, err
	}
	return build(points, d, opt, wp, raw, raw, nil)
}

// fitWeights fits with caller-supplied raw weights of any positive scale,
// one per non-excluded point; opt.Weighting names the scheme whose rule
// gives an unknown's weight. Fit uses the same path; tests use it to show
// that scaling every weight changes nothing.
func fitWeights(points []Point, opt Options, raw []float64) (*Report, error) {
	opt, err := resolveOptions(opt)
	if err != nil {
		return nil, err
	}
	d, err := prepare(points, opt.Model)
	if err != nil {
		return nil, err
	}
	if len(raw) != len(d.x) {
		return nil, inputErr("weights", "%d weights for %d fitted points", len(raw), len(d.x))
	}
	for i, w := range raw {
		if !(w > 0) || math.IsInf(w, 0) {
			return nil, inputErr("weights["+strconv.Itoa(i)+"]", "weight must be a finite number > 0, got %v", w)
		}
	}
	wp, planRaw, err := planWeights(opt.Weighting, d)
	if err != nil {
		return nil, err
	}
	return build(points, d, opt, wp, planRaw, append([]float64(nil), raw...), nil)
}

// resolveOptions applies the documented defaults and validates opt.
func resolveOptions(opt Options) (Options, error) {
	switch opt.Model {
	case "":
		opt.Model = Linear
	case Linear, LinearOrigin, Quadratic:
	default:
		return opt, inputErr("options.model", "unknown model %q (want linear, linear_origin or quadratic)", opt.Model)
	}
	switch opt.Weighting {
	case "":
		opt.Weighting = WeightNone
	case WeightNone, WeightInvX, WeightInvX2, WeightInvY, WeightInvY2, WeightInvS2, WeightAuto:
	default:
		return opt, inputErr("options.weighting", "unknown weighting %q", opt.Weighting)
	}
	if opt.Confidence == 0 {
		opt.Confidence = 0.95
	}
	if !(opt.Confidence > 0 && opt.Confidence < 1) {
		return opt, inputErr("options.confidence", "must lie in (0, 1), got %v", opt.Confidence)
	}
	if opt.Policy.isZero() {
		opt.Policy = DefaultPolicy()
	}
	if err := opt.Policy.validate(); err != nil {
		return opt, err
	}
	return opt, nil
}

// prepare validates the points and groups the fitted ones into levels.
func prepare(points []Point, model Model) (*dataset, error) {
	if len(points) == 0 {
		return nil, inputErr("points", "no calibration points")
	}
	labels := make(map[string]float64)
	d := &dataset{}
	for i, p := range points {
		f := "points[" + strconv.Itoa(i) + "]"
		if math.IsNaN(p.X) || math.IsInf(p.X, 0) {
			return nil, inputErr(f+".x", "concentration is not a finite number")
		}
		if p.X < 0 {
			return nil, inputErr(f+".x", "negative concentration %v", p.X)
		}
		if math.IsNaN(p.Y) || math.IsInf(p.Y, 0) {
			return nil, inputErr(f+".y", "response is not a finite number")
		}
		if p.Level != "" {
			if x, ok := labels[p.Level]; ok && x != p.X {
				return nil, inputErr(f+".level", "level %q has readings at two concentrations (%v and %v)", p.Level, x, p.X)
			}
			labels[p.Level] = p.X
		}
		if !p.Excluded {
			d.idx = append(d.idx, i)
			d.x = append(d.x, p.X)
			d.y = append(d.y, p.Y)
		}
	}
	n, p := len(d.x), nParams(model)
	if n == 0 {
		return nil, inputErr("points", "every point is excluded")
	}
	if n < p {
		return nil, inputErr("points", "%d fitted readings for %d coefficients (%s)", n, p, model)
	}
	if n == p {
		return nil, inputErr("points", "%d fitted readings for %d coefficients leave no residual degrees of freedom", n, p)
	}
	d.groupLevels()
	k := len(d.levels)
	if k < 2 {
		return nil, inputErr("points", "every fitted standard is at one concentration (%s): one level only", fmtG(d.x[0]))
	}
	if model == Quadratic && k < 3 {
		return nil, inputErr("points", "a quadratic needs three or more concentrations, got %d", k)
	}
	equal := true
	for _, y := range d.y[1:] {
		if y != d.y[0] {
			equal = false
			break
		}
	}
	if equal {
		return nil, inputErr("points", "all responses are equal (%s): the curve has no slope", fmtG(d.y[0]))
	}
	return d, nil
}

// groupLevels groups the fitted readings by exact nominal concentration.
func (d *dataset) groupLevels() {
	order := make([]int, len(d.x))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return d.x[order[a]] < d.x[order[b]] })
	d.levels = d.levels[:0]
	for _, i := range order {
		if k := len(d.levels); k > 0 && d.levels[k-1].x == d.x[i] {
			d.levels[k-1].idx = append(d.levels[k-1].idx, i)
			continue
		}
		d.levels = append(d.levels, level{x: d.x[i], idx: []int{i}})
	}
	for l := range d.levels {
		lv := &d.levels[l]
		lv.count = len(lv.idx)
		var s float64
		for _, i := range lv.idx {
			s += d.y[i]
		}
		lv.mean = s / float64(lv.count)
		if lv.count > 1 {
			var ss float64
			for _, i := range lv.idx {
				ss += (d.y[i] - lv.mean) * (d.y[i] - lv.mean)
			}
			lv.sd = math.Sqrt(ss / float64(lv.count-1))
		}
	}
}

// lsq is a weighted least-squares solution.
type lsq struct {
	p      int
	beta   []float64 // coefficients, model-equation order
	xtwx   []float64 // (XᵀWX)⁻¹, p×p row-major
	s      float64   // √(Σw e²/df)
	ssr    float64   // Σw e²
	df     int
	r2     float64
	fitted []float64
	resid  []float64
	lev    []float64 // diagonal of the weighted hat matrix
}

// basis fills v with the regressors of model at x: (1, x), (x) or (1, x, x²).
func basis(m Model, x float64, v []float64) {
	switch m {
	case LinearOrigin:
		v[0] = x
	case Quadratic:
		v[0], v[1], v[2] = 1, x, x*x
	default:
		v[0], v[1] = 1, x
	}
}

// solveLSQ solves min Σwᵢ(yᵢ − Xᵢβ)² by Householder QR of √W·X·D (gonum
// mat.QR), D a diagonal of powers of two that scales each column to unit
// order (exact, and it keeps R well scaled). With R the triangular factor,
// β = D·R⁻¹Qᵀ√W·y, refined once by solving for the correction from the
// residuals e = y − Xβ, which are accumulated in double-double arithmetic
// (mixed-precision iterative refinement); (XᵀWX)⁻¹ = D·R⁻¹R⁻ᵀ·D and the
// leverages hᵢ = ‖(√wᵢ·Xᵢ·D)R⁻¹‖².
//
// Preconditions: len(x) = len(y) = len(w) = n > p, w > 0; otherwise, or if
// √W·X is numerically rank-deficient, an *InputError. The weights are used
// as given (no normalisation): scaling them by k scales s by √k and leaves
// β, s²(XᵀWX)⁻¹, leverages and studentised residuals unchanged.
func solveLSQ(model Model, x, y, w []float64) (lsq, error) {
	n, p := len(x), nParams(model)
	if n <= p {
		return lsq{}, inputErr("points", "%d readings for %d coefficients", n, p)
	}
	// One allocation for the design (n·p), the right-hand side (n), and the
	// fitted values, residuals and leverages (3n).
	buf := make([]float64, n*p+4*n)
	data, rhs := buf[:n*p:n*p], buf[n*p:n*p+n:n*p+n]
	var v [3]float64
	var norms [3]float64
	for i := range x {
		r := math.Sqrt(w[i])
		basis(model, x[i], v[:])
		for j := 0; j < p; j++ {
			a := r * v[j]
			data[i*p+j] = a
			norms[j] += a * a
		}
	}
	var scale [3]float64
	for j := 0; j < p; j++ {
		e := 0
		if norms[j] > 0 && !math.IsInf(norms[j], 0) {
			_, e = math.Frexp(math.Sqrt(norms[j]))
		}
		scale[j] = math.Ldexp(1, -e)
	}
	for i := 0; i < n; i++ {
		for j := 0; j < p; j++ {
			data[i*p+j] *= scale[j]
		}
	}
	for _, a := range data {
		if math.IsNaN(a) || math.IsInf(a, 0) {
			return lsq{}, inputErr("points", "values are outside the numerically usable range")
		}
	}
	var qr mat.QR
	qr.Factorize(mat.NewDense(n, p, data))
	var rt mat.Dense
	qr.RTo(&rt)

	// R⁻¹ by back substitution (p ≤ 3), with a rank check on the diagonal.
	var r, rinv [3][3]float64
	maxd := 0.0
	for j := 0; j < p; j++ {
		for k := j; k < p; k++ {
			r[j][k] = rt.At(j, k)
		}
		maxd = math.Max(maxd, math.Abs(r[j][j]))
	}
	for j := 0; j < p; j++ {
		if !(math.Abs(r[j][j]) > 1e-11*maxd) {
			return lsq{}, inputErr("points", "the concentrations are too close together to fit %s (numerically singular)", model)
		}
	}
	for j := p - 1; j >= 0; j-- {
		rinv[j][j] = 1 / r[j][j]
		for k := j + 1; k < p; k++ {
			var s float64
			for l := j + 1; l <= k; l++ {
				s += r[j][l] * rinv[l][k]
			}
			rinv[j][k] = -s / r[j][j]
		}
	}
	out := lsq{p: p, df: n - p, beta: make([]float64, p), xtwx: make([]float64, p*p)}
	out.fitted, out.resid, out.lev = buf[n*p+n:n*p+2*n:n*p+2*n], buf[n*p+2*n:n*p+3*n:n*p+3*n], buf[n*p+3*n:]
	bm := mat.NewDense(n, 1, rhs)
	var sol mat.Dense
	for pass := 0; pass < 2; pass++ {
		// pass 0 solves for β; pass 1 for the correction from the residuals.
		for i := range x {
			e := y[i]
			if pass == 1 {
				e = residualDD(model, out.beta, x[i], y[i])
			}
			rhs[i] = math.Sqrt(w[i]) * e
		}
		if err := qr.SolveTo(&sol, false, bm); err != nil {
			var c mat.Condition
			if !errors.As(err, &c) {
				return lsq{}, inputErr("points", "least-squares solve failed: %v", err)
			}
		}
		for j := 0; j < p; j++ {
			out.beta[j] += sol.At(j, 0) * scale[j]
		}
	}
	for j := 0; j < p; j++ {
		for k := 0; k < p; k++ {
			var s float64
			for l := max(j, k); l < p; l++ {
				s += rinv[j][l] * rinv[k][l]
			}
			out.xtwx[j*p+k] = s * scale[j] * scale[k]
		}
	}
	var sumw, swy float64
	for i := range x {
		e := residualDD(model, out.beta, x[i], y[i])
		out.fitted[i] = y[i] - e
		out.resid[i] = e
		out.ssr += w[i] * e * e
		sumw += w[i]
		swy += w[i] * y[i]
		var h float64
		for k := 0; k < p; k++ {
			var s float64
			for j := 0; j <= k; j++ {
				s += data[i*p+j] * rinv[j][k]
			}
			h += s * s
		}
		out.lev[i] = h
	}
	out.s = math.Sqrt(out.ssr / float64(out.df))
	var tss float64
	if model == LinearOrigin {
		for i := range y {
			tss += w[i] * y[i] * y[i]
		}
	} else {
		my := swy / sumw
		for i := range y {
			tss += w[i] * (y[i] - my) * (y[i] - my)
		}
	}
	if !(tss > 0) || math.IsInf(tss, 0) || math.IsInf(out.ssr, 0) || math.IsNaN(out.ssr) {
		return lsq{}, inputErr("points", "the responses cannot be fitted (no spread, or outside the numerically usable range)")
	}
	out.r2 = 1 - out.ssr/tss
	return out, nil
}

// residualDD returns y − Σβⱼvⱼ(x) accumulated in double-double arithmetic
// (products split exactly with FMA, sums with TwoSum), so that the residual
// of a near-exact fit keeps its digits.
func residualDD(model Model, beta []float64, x, y float64) float64 {
	hi, lo := y, 0.0
	sub := func(b, v float64) {
		p := b * v
		pe := math.FMA(b, v, -p) // b·v = p + pe exactly
		s := hi - p
		bb := s - hi
		e := (hi - (s - bb)) + (-p - bb) // TwoSum(hi, −p) error
		hi = s
		lo += e - pe
	}
	switch model {
	case LinearOrigin:
		sub(beta[0], x)
	case Quadratic:
		x2 := x * x
		x2e := math.FMA(x, x, -x2) // x² = x2 + x2e exactly
		sub(beta[0], 1)
		sub(beta[1], x)
		sub(beta[2], x2)
		sub(beta[2], x2e)
	default:
		sub(beta[0], 1)
		sub(beta[1], x)
	}
	return hi + lo
}

// fitAuto fits every candidate scheme and keeps the one with the smallest
// Σ|%RE| of the back-calculated standards (Almeida et al., J. Chromatogr. B
// 774 (2002) 215). Candidates: none, 1/x, 1/x², 1/y, 1/y², and 1/s² only
// when every level has replicates. Ties keep the earlier (simpler) scheme.
// Standards at nominal zero carry no %RE and do not count.
func fitAuto(points []Point, d *dataset, opt Options) (*Report, error) {
	cands := []Weighting{WeightNone, WeightInvX, WeightInvX2, WeightInvY, WeightInvY2, WeightInvS2}
	scores := make([]WeightScore, 0, len(cands))
	best := -1
	var bestPlan weightPlan
	var bestRaw []float64
	for _, c := range cands {
		sc := WeightScore{Weighting: c}
		if c == WeightInvS2 {
			if lv := d.unreplicated(); lv >= 0 {
				sc.Note = "skipped: the level at x = " + fmtG(d.levels[lv].x) + " has no replicates"
				scores = append(scores, sc)
				continue
			}
		}
		wp, raw, err := planWeights(c, d)
		if err != nil {
			sc.Note = "skipped: " + err.Error()
			scores = append(scores, sc)
			continue
		}
		w := append([]float64(nil), raw...)
		normalise(w)
		f, err := solveLSQ(opt.Model, d.x, d.y, w)
		if err != nil {
			sc.Note = "skipped: " + err.Error()
			scores = append(scores, sc)
			continue
		}
		lo, hi := d.levels[0].x, d.levels[len(d.levels)-1].x
		sum, ok := 0.0, true
		for i := range d.x {
			if d.x[i] == 0 {
				continue
			}
			xb, _, found := invertCurve(opt.Model, f.beta, lo, hi, d.y[i])
			if !found {
				ok = false
				break
			}
			sum += math.Abs(100 * (xb - d.x[i]) / d.x[i])
		}
		if !ok || math.IsNaN(sum) || math.IsInf(sum, 0) {
			sc.Note = "skipped: a standard could not be read back from this curve"
			scores = append(scores, sc)
			continue
		}
		sc.SumAbsRE = sum
		scores = append(scores, sc)
		if best < 0 || sum < scores[best].SumAbsRE {
			best = len(scores) - 1
			bestPlan, bestRaw = wp, raw
		}
	}
	if best < 0 {
		return nil, inputErr("options.weighting", "auto: no candidate weighting could be fitted")
	}
	scores[best].Chosen = true
	return build(points, d, opt, bestPlan, bestRaw, bestRaw, scores)
}

// unreplicated returns the index of the first level with a single reading,
// or −1 if every level has replicates.
func (d *dataset) unreplicated() int {
	for i, lv := range d.levels {
		if lv.count < 2 {
			return i
		}
	}
	return -1
}
