package calib

import (
	"math"
	"math/rand/v2"
	"slices"
	"strconv"

	"gonum.org/v1/gonum/stat/distuv"
)

// MCOptions sets up a Monte Carlo propagation.
type MCOptions struct {
	// Draws is M; 0 means max(10⁵, ⌈10⁴/(1 − p)⌉), 200 000 for p = 0.95
	// (JCGM 101 §7.2.2 asks for M large compared with 1/(1 − p); the 10⁴
	// factor is from memory). At most MaxMCDraws.
	Draws int
	// Seed of the PCG generator (math/rand/v2); the same seed and input give
	// the same result.
	Seed uint64
}

// MaxMCDraws bounds MCOptions.Draws (the draws are kept and sorted: 8 bytes each).
const MaxMCDraws = 10_000_000

// MCResult is the output of a Monte Carlo propagation (JCGM 101 §7).
type MCResult struct {
	Draws     int // M, the model evaluations used
	Discarded int // evaluations that gave no finite value (a drawn slope of exactly 0, a response beyond a drawn curve's asymptote), not in Draws
	// Unbounded: more than (1 − p)/2 of all evaluations gave no value, so
	// at least one end of the 100p % coverage interval lies where the model
	// has none (beyond an asymptote): Low and High, from the finite values
	// only, then understate the interval and must not be reported.
	Unbounded bool
	Seed      uint64
	Level     float64 // coverage probability p
	Estimate  float64 // y at the input estimates, for reference
	Mean, SD  float64 // of the M values: the MC estimate of y and its standard uncertainty
	// Low, High: the probabilistically symmetric coverage interval
	// (JCGM 101 §7.7.1), the (1 − p)/2 and (1 + p)/2 quantiles.
	Low, High float64
	// ShortLow, ShortHigh: the shortest coverage interval (JCGM 101 §7.7.2).
	ShortLow, ShortHigh float64
	Cautions            []string
}

// MonteCarlo propagates the distributions of the budget's terms through its
// model by simulation (JCGM 101): per draw each term is drawn by its Kind
// (normal N(x, u²); rectangular on x ± √3·u; Type A with finite ν as
// x + u·t_ν, JCGM 101 §6.4.9.7), the terms of one correlation group from one
// shared variate, and a term with a CurveDraw as Dilution·(ȳ0 − b0)/b1 with
// (b0, b1) from their bivariate normal (Cholesky factor of Cov) and ȳ0 from
// N(ȳ0, SDMeanY²), scaled jointly to a multivariate t when its DF > 0. The model values give the mean, the SD, the symmetric and
// the shortest 100p % coverage intervals. in.Level is p (0 means 0.95).
//
// Preconditions: those of ComputeBudget; Draws in [0, MaxMCDraws]; a
// CurveDraw with a positive semi-definite covariance.
func MonteCarlo(in BudgetInput, opt MCOptions) (MCResult, error) {
	in, err := in.resolved()
	if err != nil {
		return MCResult{}, err
	}
	m := opt.Draws
	if m == 0 {
		m = max(100_000, int(math.Ceil(1e4/(1-in.Level))))
	}
	if m < 0 || m > MaxMCDraws {
		return MCResult{}, inputErr("draws", "must lie in [0, %d], got %d", MaxMCDraws, opt.Draws)
	}
	samplers, err := newSamplers(&in)
	if err != nil {
		return MCResult{}, err
	}
	src := rand.NewPCG(opt.Seed, 0x9e3779b97f4a7c15)
	rng := rand.New(src)
	group := make(map[string]int)
	for i, t := range in.Terms {
		if t.Group != "" {
			if _, ok := group[t.Group]; !ok {
				group[t.Group] = len(group)
			}
		}
		samplers[i].group = -1
		if t.Group != "" {
			samplers[i].group = group[t.Group]
		}
	}
	shared := make([]float64, len(group))
	sharedSet := make([]bool, len(group))
	x := make([]float64, len(in.Terms))
	ys := make([]float64, 0, m)
	res := MCResult{Seed: opt.Seed, Level: in.Level, Cautions: Cautions(),
		Estimate: in.modelValue(func(i int) float64 { return in.Terms[i].Value })}
	for len(ys) < m {
		clear(sharedSet)
		for i := range in.Terms {
			s := &samplers[i]
			if s.group >= 0 {
				if !sharedSet[s.group] {
					shared[s.group] = s.variate(rng)
					sharedSet[s.group] = true
				}
				x[i] = s.value + s.scale*shared[s.group]
				continue
			}
			x[i] = s.draw(rng)
		}
		y := in.modelValue(func(i int) float64 { return x[i] })
		if math.IsNaN(y) || math.IsInf(y, 0) {
			res.Discarded++
			if res.Discarded > m {
				return MCResult{}, inputErr("terms", "the model gives no finite value for most draws")
			}
			continue
		}
		ys = append(ys, y)
	}
	slices.Sort(ys)
	res.Draws = m
	if res.Discarded > 0 {
		all := float64(m + res.Discarded)
		res.Unbounded = float64(res.Discarded) > (1-in.Level)/2*all
		msg := strconv.Itoa(res.Discarded) + " of " + strconv.Itoa(m+res.Discarded) + " Monte Carlo evaluations gave no finite value (for a calibration curve: the drawn response beyond the drawn curve's asymptote) and are left out of the statistics"
		if res.Unbounded {
			msg += "; they exceed (1 − p)/2 of the evaluations, so the coverage interval is open on that side and its finite ends must not be reported."
		} else {
			msg += "."
		}
		res.Cautions = append(res.Cautions, msg)
	}
	var sum float64
	for _, y := range ys {
		sum += y
	}
	res.Mean = sum / float64(m)
	var ss float64
	for _, y := range ys {
		ss += (y - res.Mean) * (y - res.Mean)
	}
	if m > 1 {
		res.SD = math.Sqrt(ss / float64(m-1))
	}
	res.Low, res.High, res.ShortLow, res.ShortHigh = coverageIntervals(ys, in.Level)
	return res, nil
}

// coverageIntervals returns the probabilistically symmetric and the
// shortest 100p % coverage intervals of the sorted values (JCGM 101 §7.7):
// q = ⌊pM + ½⌋ values; symmetric: r = (M − q)/2 (or (M − q + 1)/2 when that
// is not an integer), [y_(r), y_(r+q)]; shortest: the r* minimising
// y_(r*+q) − y_(r*) (1-based order statistics).
func coverageIntervals(ys []float64, p float64) (lo, hi, slo, shi float64) {
	m := len(ys)
	q := int(math.Floor(p*float64(m) + 0.5))
	if q >= m {
		return ys[0], ys[m-1], ys[0], ys[m-1]
	}
	r := (m - q + 1) / 2 // (M − q)/2 or (M − q + 1)/2, 1-based
	if r < 1 {
		r = 1
	}
	lo, hi = ys[r-1], ys[min(r+q-1, m-1)]
	best := 0
	for i := 1; i+q < m; i++ {
		if ys[i+q]-ys[i] < ys[best+q]-ys[best] {
			best = i
		}
	}
	return lo, hi, ys[best], ys[best+q]
}

// sampler draws one input quantity.
type sampler struct {
	kind  Distribution
	value float64 // x
	scale float64 // u for normal and Type A; a = √3·u for rectangular
	df    float64
	chi   distuv.ChiSquared // for Type A with finite ν
	curve *CurveDraw
	l     [3]float64 // Cholesky factor of Cov(b0, b1): l00, l10, l11
	// Of a non-linear curve: inv inverts it, lp is the lower Cholesky
	// factor of Cov(β) (p×p row-major), z and beta are scratch.
	inv       calibCurve
	lp        []float64
	z, betaSt []float64
	group     int // index of the correlation group, −1 for none
}

func newSamplers(in *BudgetInput) ([]sampler, error) {
	out := make([]sampler, len(in.Terms))
	for i, t := range in.Terms {
		s := sampler{kind: t.Kind, value: t.Value, scale: t.StdUncertainty, df: t.DF}
		if t.Kind == DistRectangular {
			s.scale = math.Sqrt(3) * t.StdUncertainty
		}
		if t.Kind == DistTypeA && !math.IsInf(t.DF, 1) {
			s.chi = distuv.ChiSquared{K: t.DF}
		}
		if t.Curve != nil {
			c := t.Curve
			if c.Dilution == 0 {
				cc := *c
				cc.Dilution = 1
				c = &cc
			}
			l, ok := cholesky2(c.Cov)
			if c.Params != nil {
				s.inv = curveOf(c.Model)
				p := len(c.Params)
				var lp []float64
				if s.inv != nil && s.inv.NumParams() == p && len(c.ParamCov) == p {
					lp, ok = choleskyPSD(c.ParamCov)
				} else {
					ok = false
				}
				for _, v := range c.Params {
					ok = ok && Finite(v)
				}
				s.lp, s.z, s.betaSt = lp, make([]float64, p), make([]float64, p)
			}
			bad := !ok || c.SDMeanY < 0
			for _, v := range []float64{c.B0, c.B1, c.MeanY, c.SDMeanY, c.Dilution} {
				bad = bad || math.IsNaN(v) || math.IsInf(v, 0)
			}
			if bad {
				return nil, inputErr("terms["+strconv.Itoa(i)+"].curve", "needs finite coefficients, ȳ0 and its SD, and a positive semi-definite covariance")
			}
			if !(c.DF >= 0) || math.IsInf(c.DF, 0) {
				return nil, inputErr("terms["+strconv.Itoa(i)+"].curve.df", "must be a finite number ≥ 0, got %v", c.DF)
			}
			s.curve, s.l = c, l
			if c.DF > 0 {
				s.chi = distuv.ChiSquared{K: c.DF}
			}
		}
		out[i] = s
	}
	return out, nil
}

// cholesky2 returns the lower Cholesky factor (l00, l10, l11) of a 2×2
// positive semi-definite matrix (choleskyPSD); a zero variance gives a zero
// row.
func cholesky2(c [2][2]float64) ([3]float64, bool) {
	l, ok := choleskyPSD([][]float64{c[0][:], c[1][:]})
	if !ok {
		return [3]float64{}, false
	}
	return [3]float64{l[0], l[2], l[3]}, true
}

// choleskyPSD returns the lower Cholesky factor (row-major) of a small
// symmetric positive semi-definite matrix; a zero pivot (a fixed
// coefficient's zero row) gives a zero column. False when the matrix is not
// square, not finite, not symmetric or not positive semi-definite.
func choleskyPSD(c [][]float64) ([]float64, bool) {
	p := len(c)
	l := make([]float64, p*p)
	for i := range p {
		if len(c[i]) < p {
			return nil, false
		}
		for j := 0; j <= i; j++ {
			a, b := c[i][j], c[j][i]
			if !Finite(a, b) || math.Abs(a-b) > 1e-9*math.Sqrt(math.Abs(c[i][i]*c[j][j])) {
				return nil, false
			}
			s := a
			for k := 0; k < j; k++ {
				s -= l[i*p+k] * l[j*p+k]
			}
			if i == j {
				if s < -1e-12*math.Abs(c[i][i]) {
					return nil, false
				}
				l[i*p+i] = math.Sqrt(max(s, 0))
				continue
			}
			if d := l[j*p+j]; d > 0 {
				l[i*p+j] = s / d
			} else if math.Abs(s) > 1e-12*math.Sqrt(math.Abs(c[i][i]*c[j][j])) {
				return nil, false
			}
		}
	}
	return l, true
}

// variate draws the standardised variate of the sampler's kind: z for
// normal, 2U − 1 for rectangular, t_ν for Type A (z when ν is infinite).
func (s *sampler) variate(rng *rand.Rand) float64 {
	switch s.kind {
	case DistRectangular:
		return 2*rng.Float64() - 1
	case DistTypeA:
		z := rng.NormFloat64()
		if math.IsInf(s.df, 1) {
			return z
		}
		s.chi.Src = rng
		return z / math.Sqrt(s.chi.Rand()/s.df)
	default:
		return rng.NormFloat64()
	}
}

// draw draws the input quantity.
func (s *sampler) draw(rng *rand.Rand) float64 {
	if c := s.curve; c != nil && s.inv != nil {
		w := 1.0
		if c.DF > 0 {
			s.chi.Src = rng
			w = math.Sqrt(c.DF / s.chi.Rand())
		}
		p := len(c.Params)
		for j := range s.z {
			s.z[j] = w * rng.NormFloat64()
		}
		for i := range p {
			v := c.Params[i]
			for k := 0; k <= i; k++ {
				v += s.lp[i*p+k] * s.z[k]
			}
			s.betaSt[i] = v
		}
		y0 := c.MeanY + c.SDMeanY*w*rng.NormFloat64()
		x, _, ok := s.inv.invert(y0, s.betaSt)
		if !ok {
			return math.NaN() // beyond the drawn curve's asymptote: no concentration
		}
		return c.Dilution * x
	}
	if c := s.curve; c != nil {
		z0, z1, z2 := rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()
		if c.DF > 0 {
			s.chi.Src = rng
			w := math.Sqrt(c.DF / s.chi.Rand())
			z0, z1, z2 = w*z0, w*z1, w*z2
		}
		b0 := c.B0 + s.l[0]*z0
		b1 := c.B1 + s.l[1]*z0 + s.l[2]*z1
		y0 := c.MeanY + c.SDMeanY*z2
		return c.Dilution * (y0 - b0) / b1
	}
	return s.value + s.scale*s.variate(rng)
}

// GUMCheck is the comparison of a GUM budget with a Monte Carlo result
// (JCGM 101 §8.2).
type GUMCheck struct {
	SignificantDigits int     // n_dig used for δ
	Delta             float64 // numerical tolerance δ = ½·10^ℓ, u_c = c·10^ℓ with n_dig digits in c
	GUMLow, GUMHigh   float64 // y ∓ U (U = k·u_c, not rounded)
	DLow, DHigh       float64 // |y − U − y_low|, |y + U − y_high|
	Agree             bool    // both ≤ δ: the GUM framework is validated for this use
}

// CompareGUMMC validates the GUM budget b with the Monte Carlo result mc
// (JCGM 101 §8.2): δ = ½·10^ℓ where u_c written with ndig significant digits
// is c·10^ℓ; d_low = |y − U_p − y_low|, d_high = |y + U_p − y_high| with the
// probabilistically symmetric MC interval; the GUM is validated when both
// are at most δ. ndig is usually 1 or 2 (0 means 2). The budget and the
// Monte Carlo run must share the level of confidence.
func CompareGUMMC(b Budget, mc MCResult, ndig int) (GUMCheck, error) {
	if ndig == 0 {
		ndig = 2
	}
	if ndig < 1 || ndig > 6 {
		return GUMCheck{}, inputErr("significant_digits", "must lie in [1, 6], got %d", ndig)
	}
	if b.Level != mc.Level {
		return GUMCheck{}, inputErr("level", "budget at %v, Monte Carlo at %v", b.Level, mc.Level)
	}
	if !(b.Combined > 0) || mc.Draws == 0 {
		return GUMCheck{}, inputErr("budget", "needs a positive combined uncertainty and a Monte Carlo result")
	}
	l := math.Floor(math.Log10(b.Combined)) - float64(ndig-1)
	c := GUMCheck{SignificantDigits: ndig, Delta: 0.5 * math.Pow(10, l),
		GUMLow: b.Value - b.ExpandedExact, GUMHigh: b.Value + b.ExpandedExact}
	c.DLow = math.Abs(c.GUMLow - mc.Low)
	c.DHigh = math.Abs(c.GUMHigh - mc.High)
	c.Agree = c.DLow <= c.Delta && c.DHigh <= c.Delta
	return c, nil
}
