package calib

import "math"

// weightPlan is everything needed to compute the raw weight of a reading,
// standard or unknown, under one scheme.
type weightPlan struct {
	scheme Weighting
	floor  float64 // floor on |x| (x schemes), |y| (y schemes) or the SD (1/s²)
	vm     VarianceModel
	zeros  int // fitted readings at x = 0 or y = 0 (1/x, 1/y schemes) or levels with SD 0 (1/s²)
}

// zeroText writes the plan's ZeroHandling text to t.
func (wp weightPlan) zeroText(t *text) *text {
	switch wp.scheme {
	case WeightInvX, WeightInvX2:
		return t.s("a zero concentration is weighted as the smallest non-zero concentration among the fitted standards (").
			g(wp.floor).s("); ").i(wp.zeros).s(" fitted reading(s) at zero; no standard is dropped")
	case WeightInvY, WeightInvY2:
		return t.s("weights use |y|; a zero response is weighted as the smallest non-zero |response| among the fitted standards (").
			g(wp.floor).s("); ").i(wp.zeros).s(" fitted reading(s) with zero response; no standard is dropped")
	case WeightInvS2:
		return t.s("each standard is weighted by 1/s² of its level's replicates; a level SD of zero is replaced by the smallest non-zero level SD (").
			g(wp.floor).s("); ").i(wp.zeros).s(" level(s) with zero SD; an unknown's SD comes from s(x) = C0 + C1·x, floored at the same value")
	}
	return t.s("none needed: unweighted fit (every weight 1)")
}

// relWeight returns the raw weight of a value v (|x|, |y| or an SD) relative
// to the floor f: (f/max(|v|, f))^k, k = 1 or 2.
//
// Scaling every raw weight by f^k changes no reported number (weights are
// normalised to Σw = n) but keeps 1/x² of a tiny x from overflowing. A zero
// (or any |v| < f) gets the weight of the floor, never an infinite one.
func relWeight(v, f float64, k int) float64 {
	v = math.Abs(v)
	if v < f {
		v = f
	}
	r := f / v
	if k == 2 {
		return r * r
	}
	return r
}

// rawWeight returns the raw (unnormalised) weight of a reading at
// concentration x with response y under the plan. For 1/s² it uses the
// variance model s(x) = C0 + C1·x, floored at the plan's floor; standards
// instead use their level's observed replicate SD (see planWeights).
func (wp weightPlan) rawWeight(x, y float64) float64 {
	switch wp.scheme {
	case WeightInvX:
		return relWeight(x, wp.floor, 1)
	case WeightInvX2:
		return relWeight(x, wp.floor, 2)
	case WeightInvY:
		return relWeight(y, wp.floor, 1)
	case WeightInvY2:
		return relWeight(y, wp.floor, 2)
	case WeightInvS2:
		return relWeight(wp.vm.sd(x), wp.floor, 2)
	}
	return 1
}

// sd returns s(x) = C0 + C1·x, floored at Floor.
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
// Zero handling: a zero x (1/x, 1/x²) or y (1/y, 1/y²) is weighted as if it
// were the smallest non-zero |x| (or |y|) among the fitted standards; no
// standard is dropped because of a zero, so every candidate of automatic
// weighting is fitted to the same readings. Zero-concentration standards
// (blank, zero sample) are regressed unless marked Excluded, as ICH M10
// would have them excluded; they never carry a %RE. For 1/y schemes the
// magnitude |y| is used, so negative (baseline-corrected) responses are
// allowed. For 1/s², each standard takes the sample SD of its level's
// replicates (every level needs two or more readings); a level SD of zero is
// replaced by the smallest non-zero level SD; s(x) = C0 + C1·x is fitted to
// the level SDs by ordinary least squares so that an unknown's weight can be
// computed, floored at that same smallest level SD.
func planWeights(scheme Weighting, d *dataset) (weightPlan, []float64, error) {
	return planWeightsInto(scheme, d, make([]float64, len(d.x)))
}

// planWeightsInto is planWeights into raw (one per fitted reading).
func planWeightsInto(scheme Weighting, d *dataset, raw []float64) (weightPlan, []float64, error) {
	wp := weightPlan{scheme: scheme}
	raw = raw[:len(d.x)]
	switch scheme {
	case WeightNone:
		for i := range raw {
			raw[i] = 1
		}
		return wp, raw, nil
	case WeightInvX, WeightInvX2:
		wp.floor, wp.zeros = powerWeights(d.x, raw, scheme == WeightInvX2)
		return wp, raw, nil
	case WeightInvY, WeightInvY2:
		wp.floor, wp.zeros = powerWeights(d.y, raw, scheme == WeightInvY2)
		return wp, raw, nil
	case WeightInvS2:
		return planInvS2(d, raw)
	}
	return wp, nil, inputErr("options.weighting", "unknown weighting %q", scheme)
}

// planInvS2 weights each standard by 1/s² of its level and fits the
// variance model s(x) = C0 + C1·x to the level SDs (ordinary least squares
// over levels).
func planInvS2(d *dataset, raw []float64) (weightPlan, []float64, error) {
	wp := weightPlan{scheme: WeightInvS2}
	floor := math.Inf(1)
	for _, lv := range d.levels {
		if lv.count < 2 {
			return wp, nil, inputErr("options.weighting",
				"1/s^2 needs two or more readings at every level; the level at x = %s has %d", fmtG(lv.x), lv.count)
		}
		if lv.sd > 0 && lv.sd < floor {
			floor = lv.sd
		}
	}
	if math.IsInf(floor, 1) {
		return wp, nil, inputErr("points", "1/s^2: the replicate SD is zero at every level, so no weight can be computed")
	}
	zeros := 0
	for _, lv := range d.levels {
		if lv.sd == 0 {
			zeros++
		}
		w := relWeight(lv.sd, floor, 2)
		for _, i := range lv.idx {
			raw[i] = w
		}
	}
	// s(x) = C0 + C1·x by ordinary least squares over the level SDs.
	var sx, ss float64
	k := float64(len(d.levels))
	for _, lv := range d.levels {
		sx += lv.x
		ss += lv.sd
	}
	mx, ms := sx/k, ss/k
	var sxx, sxs float64
	for _, lv := range d.levels {
		sxx += (lv.x - mx) * (lv.x - mx)
		sxs += (lv.x - mx) * (lv.sd - ms)
	}
	c1 := 0.0
	if sxx > 0 {
		c1 = sxs / sxx
	}
	wp.vm = VarianceModel{Kind: "linear_sd", C0: ms - c1*mx, C1: c1, Floor: floor}
	wp.floor, wp.zeros = floor, zeros
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
// 1/s² from the variance model at x̂0.
func (r *Report) unknownWeight(x0, y0 float64) float64 {
	wp := weightPlan{scheme: r.Weighting, floor: r.WeightFloor, vm: r.Variance}
	if r.Weighting == WeightInvS2 {
		wp.floor = r.Variance.Floor
	}
	return r.WeightScale * wp.rawWeight(x0, y0)
}

// powerWeights fills raw with 1/|v| (or 1/v² when squared) for each value,
// a zero taking the weight of the smallest non-zero |v| (the floor it
// returns, with the number of zeros).
func powerWeights(values, raw []float64, squared bool) (floor float64, zeros int) {
	floor = smallestNonZeroAbs(values)
	k := 1
	if squared {
		k = 2
	}
	for i, v := range values {
		if v == 0 {
			zeros++
		}
		raw[i] = relWeight(v, floor, k)
	}
	return floor, zeros
}
