package calib

import "math"

// The non-linear calibration models (FitCurve). Concentrations x are ≥ 0;
// coefficients are reported in the order given.
//
// The logistic models are logistic in log concentration:
//
//	5PL: y = d + (a − d)/(1 + (x/c)^b)^g,  coefficients [a, b, c, d, g]
//	4PL: y = d + (a − d)/(1 + (x/c)^b),    coefficients [a, b, c, d]
//
// with a the response at zero concentration, d the response at infinite
// concentration, c > 0 the inflection (EC50 of the 4PL) in concentration
// units, b > 0 the slope factor and g > 0 the asymmetry (g = 1 gives the
// 4PL; Gottschalk & Dunn 2005). Sign convention: b is positive for every
// curve; whether the curve rises or falls is carried by a < d (rising) or
// a > d (falling). Some libraries instead let b's sign carry the direction
// (drc's b is negative for a rising curve); convert before comparing.
const (
	FourPL Model = "4pl" // y = d + (a − d)/(1 + (x/c)^b), coefficients [a, b, c, d]
	FivePL Model = "5pl" // y = d + (a − d)/(1 + (x/c)^b)^g, coefficients [a, b, c, d, g]
	// Power is y = a·x^b, coefficients [a, b], b > 0.
	Power Model = "power"
	// ExpSaturation is y = a·(1 − e^(−b·x)), coefficients [a, b], b > 0: a
	// detector that saturates towards a, with zero response at zero.
	ExpSaturation Model = "exp_saturation"
	// ExpSaturationOffset is y = y0 + a·(1 − e^(−b·x)), coefficients
	// [a, b, y0]: the same with a blank response y0 (most detectors read
	// something at zero concentration).
	ExpSaturationOffset Model = "exp_saturation_offset"
)

// Prediction flags of the non-linear models.
const (
	// FlagAboveAsymptote: the response is at or above the highest response
	// the curve approaches (the upper asymptote of a logistic, the plateau
	// of a saturating exponential): no concentration gives it.
	FlagAboveAsymptote = "above_asymptote"
	// FlagBelowAsymptote: the response is at or below the lowest response
	// the curve approaches: no concentration gives it.
	FlagBelowAsymptote = "below_asymptote"
)

// calibCurve is a Curve that can be inverted: a calibration model.
type calibCurve interface {
	Curve
	// slope returns ∂f/∂x at x.
	slope(x float64, beta []float64) float64
	// evalSlope returns Eval(x, beta, grad) and slope(x, beta) together.
	evalSlope(x float64, beta, grad []float64) (float64, float64)
	// invert returns x with f(x; β) = y; when there is none, ok is false
	// and flag says why.
	invert(y float64, beta []float64) (x float64, flag string, ok bool)
}

// curveOf returns the curve of a non-linear model, or nil.
func curveOf(m Model) calibCurve {
	switch m {
	case FourPL:
		return logistic{}
	case FivePL:
		return logistic{five: true}
	case Power:
		return powerCurve{}
	case ExpSaturation:
		return expCurve{}
	case ExpSaturationOffset:
		return expCurve{offset: true}
	}
	return nil
}

// logistic is the 4PL (five false) or the 5PL.
type logistic struct{ five bool }

func (l logistic) NumParams() int {
	if l.five {
		return 5
	}
	return 4
}

// logU returns ln(x/c) for x, c > 0: one logarithm of the ratio, or
// ln x − ln c when the ratio under- or overflows.
func logU(x, c float64) float64 {
	if r := x / c; r > 0 && r <= math.MaxFloat64 {
		return math.Log(r)
	}
	return math.Log(x) - math.Log(c)
}

// core returns, for the logistic at t = b·ln(x/c), h = (1 + eᵗ)^(−g),
// L = eᵗ/(1 + eᵗ), 1 − h and sp = ln(1 + eᵗ) (sp only for the 5PL),
// without overflow and from one exponential for the 4PL (where 1 − h = L).
func (l logistic) core(t, g float64) (h, lg, omh, sp float64) {
	h, lg, e := core4(t)
	if !l.five {
		return h, lg, lg, 0
	}
	sp = math.Log1p(e)
	if t > 0 {
		sp += t
	}
	return math.Exp(-g * sp), lg, -math.Expm1(-g * sp), sp
}

// core4 returns h = 1/(1 + eᵗ) and L = eᵗ/(1 + eᵗ) = 1 − h from one
// exponential, e = e^(−|t|), small enough to be inlined.
func core4(t float64) (h, lg, e float64) {
	e = math.Exp(-math.Abs(t))
	q := 1 / (1 + e)
	if t > 0 {
		return e * q, q, e
	}
	return q, e * q, e
}

// g returns the asymmetry (1 for the 4PL).
func (l logistic) g(beta []float64) float64 {
	if l.five {
		return beta[4]
	}
	return 1
}

// Eval: with t = b·ln(x/c), h and L as in core,
//
//	∂f/∂a = h, ∂f/∂d = 1 − h, ∂f/∂b = −(a − d)·g·h·L·ln(x/c),
//	∂f/∂c = (a − d)·g·h·L·b/c, ∂f/∂g = −(a − d)·h·ln(1 + eᵗ).
//
// At x = 0 (b > 0) f = a and only ∂f/∂a = 1 is non-zero (the limits).
func (l logistic) Eval(x float64, beta, grad []float64) float64 {
	if !(x > 0) {
		return l.evalZero(x, beta, grad)
	}
	if !(beta[2] > 0) {
		return math.NaN()
	}
	f, _ := l.evalU(logU(x, beta[2]), beta, grad)
	return f
}

// evalZero is Eval at x ≤ 0 (NaN there unless x = 0, b > 0 and c > 0).
func (l logistic) evalZero(x float64, beta, grad []float64) float64 {
	if x == 0 && beta[1] > 0 && beta[2] > 0 {
		if grad != nil {
			clear(grad[:l.NumParams()])
			grad[0] = 1
		}
		return beta[0]
	}
	return math.NaN()
}

// evalU is Eval at x > 0 given u = ln(x/c); it also returns h·L.
func (l logistic) evalU(u float64, beta, grad []float64) (float64, float64) {
	a, b, c, d := beta[0], beta[1], beta[2], beta[3]
	g := l.g(beta)
	h, lg, omh, sp := l.core(b*u, g)
	if grad != nil {
		k := (a - d) * g * h * lg
		grad[0] = h
		grad[1] = -k * u
		grad[2] = k * b / c
		grad[3] = omh
		if l.five {
			grad[4] = -(a - d) * h * sp
		}
	}
	return d + (a-d)*h, h * lg
}

// evalBatch is Eval over every reading, with lx[i] = ln x[i] given (the
// solver computes it once): f[i] = f(x[i]; β) and, when jac is not nil, the
// gradients column-major and weighted, sw[i]·∂f/∂βⱼ at x[i] in jac[j*n+i].
// ln c (and for the 4PL a − d and b/c) are taken once.
func (l logistic) evalBatch(x, lx, sw, beta, f, jac []float64) {
	n, p := len(x), l.NumParams()
	f, lx = f[:n], lx[:n]
	if !(beta[2] > 0) {
		for i := range f {
			f[i] = math.NaN()
		}
		return
	}
	lc := math.Log(beta[2])
	if !l.five && jac != nil {
		l.evalBatch4(x, lx, sw, lc, beta, f, jac)
		return
	}
	var g [5]float64
	for i, xi := range x {
		var gi []float64
		if jac != nil {
			gi = g[:p]
		}
		if xi > 0 {
			f[i], _ = l.evalU(lx[i]-lc, beta, gi)
		} else {
			f[i] = l.evalZero(xi, beta, gi)
		}
		for j, v := range gi {
			jac[j*n+i] = sw[i] * v
		}
	}
}

// evalBatch4 is evalBatch for the 4PL with its Jacobian (evalU with g = 1
// written out): the solver's inner loop.
func (l logistic) evalBatch4(x, lx, sw []float64, lc float64, beta, f, jac []float64) {
	n := len(f)
	a, b, d := beta[0], beta[1], beta[3]
	amd, bc := a-d, b/beta[2]
	// Every slice of length n, so that the loop checks no bounds.
	ja, jb, jc, jd := jac[:n], jac[n:][:n], jac[2*n:][:n], jac[3*n:][:n]
	x, lx, sw = x[:n], lx[:n], sw[:n]
	var g [4]float64
	// A reading at the same concentration as the one before it (a
	// replicate) shares its logistic: h, L and u are computed once per run
	// of equal x.
	px := math.NaN()
	var u, h, lg float64
	for i := range n {
		s := sw[i]
		if !(x[i] > 0) {
			f[i] = l.evalZero(x[i], beta, g[:])
			ja[i], jb[i], jc[i], jd[i] = s*g[0], s*g[1], s*g[2], s*g[3]
			px = math.NaN()
			continue
		}
		if x[i] != px {
			px, u = x[i], lx[i]-lc
			// core4(b·u) written out: Go does not inline it, and this
			// is the solver's innermost loop.
			t := b * u
			e := math.Exp(-math.Abs(t))
			h = 1 / (1 + e)
			lg = e * h
			if t > 0 {
				h, lg = lg, h
			}
		}
		f[i] = d + amd*h
		sk := s * amd * h * lg
		ja[i], jb[i], jc[i], jd[i] = s*h, -sk*u, sk*bc, s*lg
	}
}

// slope is ∂f/∂x = −(a − d)·g·h·L·b/x (0 at x = 0 unless 0 < b < 1, where
// it is infinite; reported as +Inf or −Inf).
func (l logistic) slope(x float64, beta []float64) float64 {
	a, b, d := beta[0], beta[1], beta[3]
	if !(x > 0) {
		if b < 1 {
			return math.Copysign(math.Inf(1), d-a)
		}
		if b == 1 {
			return (d - a) * l.g(beta) / beta[2]
		}
		return 0
	}
	g := l.g(beta)
	h, lg, _, _ := l.core(b*logU(x, beta[2]), g)
	return -(a - d) * g * h * lg * b / x
}

// evalSlope returns Eval (with grad) and slope at x in one evaluation.
func (l logistic) evalSlope(x float64, beta, grad []float64) (float64, float64) {
	if !(x > 0 && beta[2] > 0) {
		return l.Eval(x, beta, grad), l.slope(x, beta)
	}
	f, hl := l.evalU(logU(x, beta[2]), beta, grad)
	return f, -(beta[0] - beta[3]) * l.g(beta) * hl * beta[1] / x
}

// invert: with u = (y − d)/(a − d) in (0, 1),
// x = c·(u^(−1/g) − 1)^(1/b), computed as c·exp(ln(expm1(−ln(u)/g))/b)
// (for the 4PL, c·exp(ln((a − y)/(y − d))/b)).
// A response outside the open interval between a and d has no inverse.
func (l logistic) invert(y float64, beta []float64) (float64, string, bool) {
	a, b, c, d := beta[0], beta[1], beta[2], beta[3]
	g := 1.0
	if l.five {
		g = beta[4]
	}
	lo, hi := min(a, d), max(a, d)
	switch {
	case !(y > lo):
		return 0, FlagBelowAsymptote, false
	case !(y < hi):
		return 0, FlagAboveAsymptote, false
	}
	// e = u^(−1/g) − 1; for the 4PL (g = 1) that is (1 − u)/u = (a − y)/(y − d),
	// one division instead of a logarithm and an expm1.
	var e float64
	if l.five {
		e = math.Expm1(-math.Log((y-d)/(a-d)) / g)
	} else {
		e = (a - y) / (y - d)
	}
	x := c * math.Exp(math.Log(e)/b)
	if !(x > 0) || math.IsInf(x, 0) {
		// The response is so close to an asymptote that x under- or
		// overflows.
		if (y-lo < hi-y) == (a < d) {
			return 0, FlagBelowAsymptote, false
		}
		return 0, FlagAboveAsymptote, false
	}
	return x, "", true
}

// powerCurve is y = a·x^b.
type powerCurve struct{}

func (powerCurve) NumParams() int { return 2 }

// Eval: ∂f/∂a = x^b, ∂f/∂b = a·x^b·ln x; at x = 0 (b > 0) both are 0.
func (powerCurve) Eval(x float64, beta, grad []float64) float64 {
	a, b := beta[0], beta[1]
	if x == 0 && b > 0 {
		if grad != nil {
			grad[0], grad[1] = 0, 0
		}
		return 0
	}
	if !(x > 0) {
		return math.NaN()
	}
	lx := math.Log(x)
	v := math.Exp(b * lx)
	if grad != nil {
		grad[0], grad[1] = v, a*v*lx
	}
	return a * v
}

func (powerCurve) slope(x float64, beta []float64) float64 {
	a, b := beta[0], beta[1]
	if !(x > 0) {
		switch {
		case b < 1:
			return math.Copysign(math.Inf(1), a)
		case b == 1:
			return a
		}
		return 0
	}
	return a * b * math.Exp((b-1)*math.Log(x))
}

func (c powerCurve) evalSlope(x float64, beta, grad []float64) (float64, float64) {
	return c.Eval(x, beta, grad), c.slope(x, beta)
}

// invert: x = (y/a)^(1/b) for y/a > 0; otherwise no root on x > 0.
func (powerCurve) invert(y float64, beta []float64) (float64, string, bool) {
	a, b := beta[0], beta[1]
	r := y / a
	if !(r > 0) || math.IsInf(r, 0) {
		return 0, FlagNoRoot, false
	}
	x := math.Exp(math.Log(r) / b)
	if !(x > 0) || math.IsInf(x, 0) {
		return 0, FlagNoRoot, false
	}
	return x, "", true
}

// expCurve is y = [y0 +] a·(1 − e^(−b·x)).
type expCurve struct{ offset bool }

func (e expCurve) NumParams() int {
	if e.offset {
		return 3
	}
	return 2
}

// Eval: ∂f/∂a = 1 − e^(−bx), ∂f/∂b = a·x·e^(−bx), ∂f/∂y0 = 1.
func (e expCurve) Eval(x float64, beta, grad []float64) float64 {
	a, b := beta[0], beta[1]
	var y0 float64
	if e.offset {
		y0 = beta[2]
	}
	ex := math.Exp(-b * x)
	om := -math.Expm1(-b * x)
	if grad != nil {
		grad[0], grad[1] = om, a*x*ex
		if e.offset {
			grad[2] = 1
		}
	}
	return y0 + a*om
}

func (e expCurve) slope(x float64, beta []float64) float64 {
	return beta[0] * beta[1] * math.Exp(-beta[1]*x)
}

func (e expCurve) evalSlope(x float64, beta, grad []float64) (float64, float64) {
	return e.Eval(x, beta, grad), e.slope(x, beta)
}

// invert: with u = (y − y0)/a, x = −ln(1 − u)/b for u < 1; u ≥ 1 is at or
// beyond the plateau y0 + a. A response on the far side of the blank
// (u < 0) gives a negative x, which is returned (and flagged negative by
// the caller), as for the straight line.
func (e expCurve) invert(y float64, beta []float64) (float64, string, bool) {
	a, b := beta[0], beta[1]
	var y0 float64
	if e.offset {
		y0 = beta[2]
	}
	u := (y - y0) / a
	if !(u < 1) {
		if a > 0 {
			return 0, FlagAboveAsymptote, false
		}
		return 0, FlagBelowAsymptote, false
	}
	x := -math.Log1p(-u) / b
	if math.IsInf(x, 0) || math.IsNaN(x) {
		return 0, FlagNoRoot, false
	}
	return x, "", true
}
