package calib

import (
	"cmp"
	"math"
	"slices"
	"strconv"
)

// dataset holds the fitted (non-excluded) readings and their levels.
type dataset struct {
	idx    []int // index in the caller's points of each fitted reading
	order  []int // fitted readings by increasing x (stable); levels' idx are runs of it
	level  []int // index in levels of each fitted reading
	x, y   []float64
	levels []level // by increasing x
	// spare is the rest of the float64 block that holds x and y: the
	// per-reading workspace of one fit (raw weights, the design, the
	// solution's per-reading arrays), handed out by take.
	spare []float64
}

// spareLen is the workspace of one fit of n readings, in float64s: the
// raw weights, the design of up to three regressors and the solution's
// arrays.
func spareLen(n int) int { return n + designLen(n, 3) + fitLen(3, n) }

// take returns k floats of d's workspace, or new ones when it is used up.
// Each part is handed out once per fit, so concurrent fits share nothing.
func (d *dataset) take(k int) []float64 {
	if len(d.spare) < k {
		return make([]float64, k)
	}
	s := d.spare[:k:k]
	d.spare = d.spare[k:]
	return s
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
	case LinearOrigin, AverageRF:
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
	if IsCurveModel(opt.Model) {
		return fitCurveReport(points, opt)
	}
	if err := opt.Curve.Check(opt.Model); err != nil {
		return nil, err
	}
	if opt.Model == AverageRF {
		return fitAverageRFReport(points, opt)
	}
	opt, err := resolveOptions(opt)
	if err != nil {
		return nil, err
	}
	d, err := prepare(points, opt.Model)
	if err != nil {
		return nil, err
	}
	scores, advised := scoreCandidates(d, opt)
	scheme := opt.Weighting
	if scheme == WeightAuto {
		if advised < 0 {
			return nil, inputErr("options.weighting", "auto: no candidate weighting could be fitted")
		}
		scheme = scores[advised].Weighting
	}
	wp, raw, err := planWeightsInto(scheme, d, d.take(len(d.x)), opt.Weights.MinReplicates)
	if err != nil {
		return nil, err
	}
	for i := range scores {
		scores[i].Chosen = scores[i].Weighting == scheme
	}
	return build(points, d, opt, wp, raw, raw, scores)
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
	wp, planRaw, err := planWeightsInto(opt.Weighting, d, d.take(len(d.x)), opt.Weights.MinReplicates)
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
	default:
		if !slices.Contains(Weightings(), opt.Weighting) {
			return opt, inputErr("options.weighting", "unknown weighting %q", opt.Weighting)
		}
	}
	def := DefaultWeightOptions()
	if opt.Weights.MinReplicates == 0 {
		opt.Weights.MinReplicates = def.MinReplicates
	}
	if opt.Weights.MinReplicates < 2 {
		return opt, inputErr("options.weights.min_replicates", "must be at least 2 (an SD needs two readings), got %d", opt.Weights.MinReplicates)
	}
	if opt.Weights.LimitSigma == "" {
		opt.Weights.LimitSigma = def.LimitSigma
	}
	if !slices.Contains(SigmaBases(), opt.Weights.LimitSigma) {
		return opt, inputErr("options.weights.limit_sigma", "unknown σ basis %q", opt.Weights.LimitSigma)
	}
	if err := resolveConfidencePolicy(&opt); err != nil {
		return opt, err
	}
	return opt, nil
}

// prepare validates the points and groups the fitted ones into levels.
func prepare(points []Point, model Model) (*dataset, error) {
	d := new(dataset)
	if err := d.load(points, model); err != nil {
		return nil, err
	}
	return d, nil
}

// load is prepare into d.
func (d *dataset) load(points []Point, model Model) error {
	if len(points) == 0 {
		return inputErr("points", "no calibration points")
	}
	n0 := len(points)
	// The concentration of each level label: a short list searched
	// linearly for a typical run (backed by a stack array), a map for long
	// ones.
	var labelBuf [64]labelX
	labels := labelBuf[:0]
	var labelMap map[string]float64
	if n0 > len(labelBuf) {
		labelMap = make(map[string]float64, n0)
	}
	buf := make([]float64, 2*n0+spareLen(n0))
	ints := make([]int, 3*n0) // idx, then the level order and the level of each reading (groupLevels)
	*d = dataset{idx: ints[:0:n0], order: ints[n0 : 2*n0 : 2*n0], level: ints[2*n0 : 3*n0 : 3*n0],
		x: buf[:0:n0], y: buf[n0 : n0 : 2*n0], spare: buf[2*n0:]}
	for i, p := range points {
		// field names the point for an error; built only when one is reported.
		field := func(sub string) string { return "points[" + strconv.Itoa(i) + "]" + sub }
		if math.IsNaN(p.X) || math.IsInf(p.X, 0) {
			return inputErr(field(".x"), "concentration is not a finite number")
		}
		if p.X < 0 {
			return inputErr(field(".x"), "negative concentration %v", p.X)
		}
		if math.IsNaN(p.Y) || math.IsInf(p.Y, 0) {
			return inputErr(field(".y"), "response is not a finite number")
		}
		if p.Level != "" {
			var x float64
			seen := false
			if labelMap != nil {
				if x, seen = labelMap[p.Level]; !seen {
					labelMap[p.Level] = p.X
				}
			} else {
				labels, x, seen = findLabel(labels, p.Level, p.X)
			}
			if seen && x != p.X {
				return inputErr(field(".level"), "level %q has readings at two concentrations (%v and %v)", p.Level, x, p.X)
			}
		}
		if !p.Excluded {
			d.idx = append(d.idx, i)
			d.x = append(d.x, p.X)
			d.y = append(d.y, p.Y)
		}
	}
	n, p := len(d.x), nParams(model)
	if n == 0 {
		return inputErr("points", "every point is excluded")
	}
	if n < p {
		return inputErr("points", "%d fitted readings for %d coefficients (%s)", n, p, model)
	}
	if n == p {
		return inputErr("points", "%d fitted readings for %d coefficients leave no residual degrees of freedom", n, p)
	}
	d.groupLevels()
	k := len(d.levels)
	if k < 2 {
		return inputErr("points", "every fitted standard is at one concentration (%s): one level only", fmtG(d.x[0]))
	}
	if model == Quadratic && k < 3 {
		return inputErr("points", "a quadratic needs three or more concentrations, got %d", k)
	}
	equal := true
	for _, y := range d.y[1:] {
		if y != d.y[0] {
			equal = false
			break
		}
	}
	if equal {
		return inputErr("points", "all responses are equal (%s): the curve has no slope", fmtG(d.y[0]))
	}
	return nil
}

// labelX is a level label and its concentration.
type labelX struct {
	label string
	x     float64
}

// findLabel returns the x of label in list and true if it is there, else
// list with (label, x) appended and false. It takes and returns the slice,
// so that a list backed by the caller's stack array stays there.
func findLabel(list []labelX, label string, x float64) ([]labelX, float64, bool) {
	// Readings of one level usually follow each other: try the last first.
	if k := len(list) - 1; k >= 0 && list[k].label == label {
		return list, list[k].x, true
	}
	for _, e := range list {
		if sameLabel(e.label, label) {
			return list, e.x, true
		}
	}
	return append(list, labelX{label, x}), x, false
}

// sameLabel is a == b for non-empty level labels, which usually differ in
// their last character ("L1", "L2", ...): that byte is compared first,
// inline, before the full comparison.
func sameLabel(a, b string) bool {
	return len(a) == len(b) && a[len(a)-1] == b[len(b)-1] && a == b
}

// groupLevels groups the fitted readings by exact nominal concentration.
func (d *dataset) groupLevels() {
	order := d.order[:len(d.x)]
	d.order = order
	for i := range order {
		order[i] = i
	}
	if len(order) <= 32 {
		// Stable insertion sort by x: readings usually arrive in level
		// order, so this is one pass; the result is the one stable sort gives.
		for k := 1; k < len(order); k++ {
			i, xi := order[k], d.x[order[k]]
			j := k
			for ; j > 0 && d.x[order[j-1]] > xi; j-- {
				order[j] = order[j-1]
			}
			order[j] = i
		}
	} else {
		slices.SortStableFunc(order, func(a, b int) int { return cmp.Compare(d.x[a], d.x[b]) })
	}
	nl := 0
	for k, i := range order {
		if k == 0 || d.x[i] != d.x[order[k-1]] {
			nl++
		}
	}
	// order is sorted by x, so each level's indices are a run of it.
	d.levels = make([]level, 0, nl)
	for k, i := range order {
		if l := len(d.levels); l > 0 && d.levels[l-1].x == d.x[i] {
			d.levels[l-1].idx = order[k-len(d.levels[l-1].idx) : k+1 : k+1]
			continue
		}
		d.levels = append(d.levels, level{x: d.x[i], idx: order[k : k+1 : k+1]})
	}
	d.level = d.level[:len(d.x)]
	for l := range d.levels {
		lv := &d.levels[l]
		for _, i := range lv.idx {
			d.level[i] = l
		}
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

// autoCandidates are the schemes auto compares, simplest first within each
// family (ties keep the earlier one).
var autoCandidates = [...]Weighting{WeightNone, WeightInvSqrtX, WeightInvX, WeightInvX2,
	WeightInvSqrtY, WeightInvY, WeightInvY2, WeightInvS2}

// scoreCandidates fits every candidate scheme and scores it by the Σ|%RE| of
// the back-calculated standards (Almeida et al., J. Chromatogr. B 774 (2002)
// 215; standards at nominal zero carry no %RE and do not count). It returns
// the scores and the index of the one auto chooses (−1 when none could be
// scored): the smallest Σ|%RE| among the candidates in which no level holds
// more than MaxLevelWeightShare of the total weight, or among all scored
// candidates when every one gives a level more. Σ|%RE| weighs the lowest
// levels most (a relative error there is a small absolute one), so without
// that rule it prefers weights that pin the curve to the lowest standard.
// 1/s² is a candidate only when every non-zero level has the method's
// minimum of readings (WeightOptions.MinReplicates). Fit reports the table
// with a fixed weighting too, so a reviewer sees what auto would choose.
func scoreCandidates(d *dataset, opt Options) ([]WeightScore, int) {
	scores := make([]WeightScore, 0, len(autoCandidates))
	w := make([]float64, len(d.x))
	raw := make([]float64, len(d.x))
	lo, hi := d.levels[0].x, d.levels[len(d.levels)-1].x
	for _, c := range autoCandidates {
		sc := WeightScore{Weighting: c}
		if c == WeightInvS2 {
			if lv, n := d.fewReadings(opt.Weights.MinReplicates); lv >= 0 {
				sc.Note = "skipped: the level at x = " + fmtG(d.levels[lv].x) + " has " + itoa(n) +
					" reading(s), fewer than the method's minimum of " + itoa(opt.Weights.MinReplicates) + " replicates for 1/s^2"
				scores = append(scores, sc)
				continue
			}
		}
		_, pr, err := planWeightsInto(c, d, raw, opt.Weights.MinReplicates)
		if err != nil {
			sc.Note = "skipped: " + err.Error()
			scores = append(scores, sc)
			continue
		}
		copy(w, pr)
		normalise(w)
		var line [2]float64
		beta, fast := line[:], lineForScore(opt.Model, d.x, d.y, w, &line)
		if !fast {
			f, err := solveLSQ(opt.Model, d.x, d.y, w)
			if err != nil {
				sc.Note = "skipped: " + err.Error()
				scores = append(scores, sc)
				continue
			}
			beta = f.beta
		}
		sum, ok := 0.0, true
		for i := range d.x {
			if d.x[i] == 0 {
				continue
			}
			xb, _, found := invertCurve(opt.Model, beta, lo, hi, d.y[i])
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
		sc.SumAbsRE, sc.Scored = sum, true
		heavy := d.heaviestLevel(w)
		sc.MaxLevelShare = heavy.Share
		if heavy.Share > MaxLevelWeightShare {
			sc.Note = "passed over: the level at x = " + fmtG(heavy.X) + " would hold " +
				strconv.FormatFloat(100*heavy.Share, 'f', 1, 64) + " % of the total weight, more than half"
		}
		scores = append(scores, sc)
	}
	best := -1
	for pass := 0; pass < 2 && best < 0; pass++ {
		for i, sc := range scores {
			if !sc.Scored || (pass == 0 && sc.MaxLevelShare > MaxLevelWeightShare) {
				continue
			}
			if best < 0 || sc.SumAbsRE < scores[best].SumAbsRE {
				best = i
			}
		}
	}
	if best >= 0 {
		scores[best].Advised = true
	}
	return scores, best
}

// lineForScore fits a weighted line (or line through the origin) in closed
// form, only to rank the candidate weightings, without allocating:
//
//	b1 = Σw(x−x̄w)(y−ȳw) / Σw(x−x̄w)²,  b0 = ȳw − b1·x̄w   (line)
//	b1 = Σwxy / Σwx²                                      (origin)
//
// with centred sums (Miller & Miller §5.10). The chosen weighting is then
// fitted by the QR solve like any other, so ranking by these coefficients
// changes no reported number; they agree with the QR solve to rounding. It
// stores the coefficients in out (invertCurve's order: b0, b1 for a line,
// b1 alone through the origin) and reports false for a quadratic or when the
// sums leave nothing to divide by, where the caller uses solveLSQ.
func lineForScore(m Model, x, y, w []float64, out *[2]float64) bool {
	switch m {
	case Linear:
		var sw, swx, swy float64
		for i := range x {
			sw += w[i]
			swx += w[i] * x[i]
			swy += w[i] * y[i]
		}
		xm, ym := swx/sw, swy/sw
		var sxx, sxy float64
		for i := range x {
			dx := x[i] - xm
			sxx += w[i] * dx * dx
			sxy += w[i] * dx * (y[i] - ym)
		}
		if !(sxx > 0) || len(x) <= 2 {
			return false
		}
		b1 := sxy / sxx
		out[0], out[1] = ym-b1*xm, b1
		return true
	case LinearOrigin, AverageRF:
		var sxx, sxy float64
		for i := range x {
			sxx += w[i] * x[i] * x[i]
			sxy += w[i] * x[i] * y[i]
		}
		if !(sxx > 0) || len(x) <= 1 {
			return false
		}
		out[0] = sxy / sxx
		return true
	}
	return false
}

// fewReadings returns the index of the first non-zero level with fewer than
// minN readings and its count, or −1.
func (d *dataset) fewReadings(minN int) (int, int) {
	for i, lv := range d.levels {
		if lv.x > 0 && lv.count < minN {
			return i, lv.count
		}
	}
	return -1, 0
}

// heaviestLevel returns the level holding the largest share of Σw.
func (d *dataset) heaviestLevel(w []float64) LevelShare {
	var total float64
	for _, v := range w {
		total += v
	}
	var best LevelShare
	for _, lv := range d.levels {
		var s float64
		for _, i := range lv.idx {
			s += w[i]
		}
		if s/total > best.Share {
			best = LevelShare{X: lv.x, Share: s / total}
		}
	}
	return best
}

// resolveConfidencePolicy applies the defaults of the confidence level
// (0.95) and the policy (DefaultPolicy) and validates both.
func resolveConfidencePolicy(opt *Options) error {
	if opt.Confidence == 0 {
		opt.Confidence = 0.95
	}
	if !(opt.Confidence > 0 && opt.Confidence < 1) {
		return inputErr("options.confidence", "must lie in (0, 1), got %v", opt.Confidence)
	}
	if opt.Policy.isZero() {
		opt.Policy = defaultPolicy
	}
	return opt.Policy.validate()
}
