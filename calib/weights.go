package calib

import "math"

// weightPlan is everything needed to compute the raw weight of a reading,
// standard or unknown, under one scheme.
type weightPlan struct {
	scheme Weighting
	floor  float64 // floor on |x| (x schemes and 1/s²) or |y| (y schemes)
	vm     VarianceModel
	zeros  int // fitted readings at x = 0 or y = 0 (1/x, 1/y schemes) or levels left out of the variance model (1/s²)
	// few lists the non-zero levels with fewer readings than the method's
	// minimum for 1/s² (their count in fewN); the fit is flagged.
	few  []float64
	fewN []int
}

// schemePower returns the variable (x or y) and exponent k of the power
// schemes 1/v^k; ok is false for none, 1/s² and unknown schemes.
func schemePower(s Weighting) (onY bool, k float64, ok bool) {
	switch s {
	case WeightInvSqrtX:
		return false, 0.5, true
	case WeightInvX:
		return false, 1, true
	case WeightInvX2:
		return false, 2, true
	case WeightInvSqrtY:
		return true, 0.5, true
	case WeightInvY:
		return true, 1, true
	case WeightInvY2:
		return true, 2, true
	}
	return false, 0, false
}

// zeroText writes the plan's ZeroHandling text to t.
func (wp weightPlan) zeroText(t *text) *text {
	if onY, _, ok := schemePower(wp.scheme); ok {
		if onY {
			return t.s("weights use |y|; a zero response is weighted as the smallest non-zero |response| among the fitted standards (").
				g(wp.floor).s("); ").i(wp.zeros).s(" fitted reading(s) with zero response; no standard is dropped")
		}
		return t.s("a zero concentration is weighted as the smallest non-zero concentration among the fitted standards (").
			g(wp.floor).s("); ").i(wp.zeros).s(" fitted reading(s) at zero; no standard is dropped")
	}
	if wp.scheme == WeightInvS2 {
		t.s("each reading is weighted by 1/s(x)² from the variance function s(x) = ").g(wp.vm.C0).s("·x^").g(wp.vm.C1).
			s(", fitted by least squares to log(level SD) against log(concentration) over the non-zero levels with two or more readings; ").
			i(wp.zeros).s(" level(s) left out of that fit (a single reading, an SD of zero or nominal zero); a concentration below the smallest non-zero standard (").
			g(wp.floor).s("), zero included, is weighted as that standard; an unknown's weight comes from the same function")
		for i, x := range wp.few {
			if i == 0 {
				t.s("; fewer readings than the method's minimum at x = ")
			} else {
				t.s(", ")
			}
			t.g(x).s(" (").i(wp.fewN[i]).s(")")
		}
		return t
	}
	return t.s("none needed: unweighted fit (every weight 1)")
}

// relWeight returns the raw weight of a value v (|x|, |y| or an SD) relative
// to the floor f: (f/max(|v|, f))^k.
//
// Scaling every raw weight by f^k changes no reported number (weights are
// normalised to Σw = n) but keeps 1/x² of a tiny x from overflowing. A zero
// (or any |v| < f) gets the weight of the floor, never an infinite one.
func relWeight(v, f float64, k float64) float64 {
	v = math.Abs(v)
	if v < f {
		v = f
	}
	r := f / v
	switch k {
	case 1:
		return r
	case 2:
		return r * r
	case 0.5:
		return math.Sqrt(r)
	}
	return math.Pow(r, k)
}

// rawWeight returns the raw (unnormalised) weight of a reading at
// concentration x with response y under the plan.
func (wp weightPlan) rawWeight(x, y float64) float64 {
	if onY, k, ok := schemePower(wp.scheme); ok {
		if onY {
			return relWeight(y, wp.floor, k)
		}
		return relWeight(x, wp.floor, k)
	}
	if wp.scheme == WeightInvS2 {
		return wp.vm.relWeight(x)
	}
	return 1
}

// relWeight returns the raw 1/s² weight of a reading at x under the
// variance function, relative to the weight at the floor.
func (vm VarianceModel) relWeight(x float64) float64 {
	if vm.Kind == varianceLinearSD { // reports stored by calib/1.0.0
		return relWeight(vm.sd(x), vm.Floor, 2)
	}
	// s(x)/s(floor) = (max(x, floor)/floor)^θ
	return relWeight(x, vm.Floor, 2*vm.C1)
}

// varianceLinearSD and variancePower are the kinds of VarianceModel.
const (
	varianceLinearSD = "linear_sd" // s(x) = C0 + C1·x, floored at Floor (an SD); calib/1.0.0
	variancePower    = "power"     // s(x) = C0·max(x, Floor)^C1, Floor a concentration
)

// SD returns the response SD the variance function gives at concentration x.
func (vm VarianceModel) SD(x float64) float64 {
	if vm.Kind == varianceLinearSD {
		return vm.sd(x)
	}
	if x < vm.Floor {
		x = vm.Floor
	}
	return vm.C0 * math.Pow(x, vm.C1)
}

// sd returns s(x) = C0 + C1·x, floored at Floor (the calib/1.0.0 model).
func (vm VarianceModel) sd(x float64) float64 {
	s := vm.C0 + vm.C1*x
	if s < vm.Floor || math.IsNaN(s) {
		s = vm.Floor
	}
	return s
}

// planWeights prepares the raw weights of the fitted standards under scheme
// and returns them with the plan that computes an unknown's weight.
//
// Zero handling: a zero x (1/x^k) or y (1/y^k) is weighted as if it were the
// smallest non-zero |x| (or |y|) among the fitted standards; no standard is
// dropped because of a zero, so every candidate of automatic weighting is
// fitted to the same readings. Zero-concentration standards (blank, zero
// sample) are regressed unless marked Excluded, as ICH M10 would have them
// excluded; they never carry a %RE. For 1/y schemes the magnitude |y| is
// used, so negative (baseline-corrected) responses are allowed. For 1/s²
// see planInvS2. minReps is the method's minimum number of readings per
// level for 1/s² (levels below it are listed in the plan).
func planWeights(scheme Weighting, d *dataset, minReps int) (weightPlan, []float64, error) {
	return planWeightsInto(scheme, d, make([]float64, len(d.x)), minReps)
}

// planWeightsInto is planWeights into raw (one per fitted reading).
func planWeightsInto(scheme Weighting, d *dataset, raw []float64, minReps int) (weightPlan, []float64, error) {
	wp := weightPlan{scheme: scheme}
	raw = raw[:len(d.x)]
	if onY, k, ok := schemePower(scheme); ok {
		v := d.x
		if onY {
			v = d.y
		}
		wp.floor, wp.zeros = powerWeights(v, raw, k)
		return wp, raw, nil
	}
	switch scheme {
	case WeightNone:
		for i := range raw {
			raw[i] = 1
		}
		return wp, raw, nil
	case WeightInvS2:
		return planInvS2(d, raw, minReps)
	}
	return wp, nil, inputErr("options.weighting", "unknown weighting %q", scheme)
}

// planInvS2 weights every reading by 1/s(x)² from a variance function fitted
// across levels rather than by its own level's SD: the SD of two or three
// readings scatters too much to weight by (with two readings, the 95 % range
// of s spans a factor of about 70, from the χ² distribution with one degree
// of freedom), and a level whose readings happen to agree would take nearly
// all the weight.
//
// Variance function, SD a power of the concentration: log s_i = a + θ·log x_i,
// fitted by ordinary least squares over the non-zero levels with two or more
// readings and an SD above zero (a power-of-the-mean variance model, as nlme's
// varPower; the mean response of a line is proportional to x up to the
// intercept). It needs three such levels, so that the fit has a residual
// degree of freedom. s(x) = e^a·max(x, x_min)^θ, x_min the smallest non-zero
// fitted concentration: below it (blanks included) the function is not
// extrapolated.
func planInvS2(d *dataset, raw []float64, minReps int) (weightPlan, []float64, error) {
	wp := weightPlan{scheme: WeightInvS2}
	floor := math.Inf(1)
	var n, sl, ss, sll, sls float64
	for _, lv := range d.levels {
		if lv.x > 0 && lv.x < floor {
			floor = lv.x
		}
		if lv.x > 0 && lv.count < minReps {
			wp.few = append(wp.few, lv.x)
			wp.fewN = append(wp.fewN, lv.count)
		}
		if lv.x <= 0 || lv.count < 2 || !(lv.sd > 0) {
			wp.zeros++
			continue
		}
		l, s := math.Log(lv.x), math.Log(lv.sd)
		n++
		sl += l
		ss += s
		sll += l * l
		sls += l * s
	}
	if n < 3 {
		return wp, nil, inputErr("options.weighting",
			"1/s^2 needs a replicate SD above zero at three or more non-zero levels to fit its variance function; %d have one", int(n))
	}
	ml, ms := sl/n, ss/n
	sxx := sll - n*ml*ml
	theta := 0.0
	if sxx > 0 {
		theta = (sls - n*ml*ms) / sxx
	}
	a := ms - theta*ml
	wp.vm = VarianceModel{Kind: variancePower, C0: math.Exp(a), C1: theta, Floor: floor}
	wp.floor = floor
	for i, x := range d.x {
		raw[i] = wp.vm.relWeight(x)
	}
	return wp, raw, nil
}

// smallestNonZeroAbs returns the smallest non-zero |v|, or 1 if every v is 0.
func smallestNonZeroAbs(v []float64) float64 {
	m := math.Inf(1)
	for _, x := range v {
		if a := math.Abs(x); a > 0 && a < m {
			m = a
		}
	}
	if math.IsInf(m, 1) {
		return 1
	}
	return m
}

// normalise scales raw weights to Σw = n in place and returns the factor
// applied, n/Σraw.
func normalise(w []float64) float64 {
	var s float64
	for _, v := range w {
		s += v
	}
	k := float64(len(w)) / s
	for i := range w {
		w[i] *= k
	}
	return k
}

// unknownWeight returns w0, the weight on the Σw = n scale that a reading of
// an unknown gets: x-based schemes at x̂0, y-based at the mean response ȳ0,
// 1/s² from the variance function at x̂0.
func (r *Report) unknownWeight(x0, y0 float64) float64 {
	wp := weightPlan{scheme: r.Weighting, floor: r.WeightFloor, vm: r.Variance}
	return r.WeightScale * wp.rawWeight(x0, y0)
}

// powerWeights fills raw with 1/|v|^k for each value, a zero taking the
// weight of the smallest non-zero |v| (the floor it returns, with the
// number of zeros).
func powerWeights(values, raw []float64, k float64) (floor float64, zeros int) {
	floor = smallestNonZeroAbs(values)
	for i, v := range values {
		if v == 0 {
			zeros++
		}
		raw[i] = relWeight(v, floor, k)
	}
	return floor, zeros
}

// weightFacts sets the Report's advised weighting, heaviest level and
// weighting flags from the normalised weights w of the fitted readings.
func (r *Report) weightFacts(d *dataset, w []float64, wp weightPlan) {
	for _, c := range r.WeightCandidates {
		if c.Advised {
			r.WeightingAdvised = c.Weighting
		}
	}
	r.HeaviestLevel = d.heaviestLevel(w)
	if r.HeaviestLevel.Share > MaxLevelWeightShare {
		r.Flags = append(r.Flags, FitFlagDominantLevel)
	}
	if wp.scheme == WeightInvS2 && len(wp.few) > 0 {
		r.Flags = append(r.Flags, FitFlagFewReplicates)
	}
}
