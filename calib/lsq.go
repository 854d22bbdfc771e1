package calib

import (
	"math"

	"gonum.org/v1/gonum/mat"
)

// lsq is a weighted least-squares solution.
type lsq struct {
	p      int
	beta   []float64 // coefficients, model-equation order
	xtwx   []float64 // (XᵀWX)⁻¹, p×p row-major, model-equation order
	s      float64   // √(Σw e²/df)
	ssr    float64   // Σw e²
	df     int
	r2     float64
	fitted []float64
	resid  []float64
	lev    []float64 // diagonal of the weighted hat matrix
}

// powers returns the powers of x of the model's regressors, in
// model-equation order.
func powers(m Model) []int {
	switch m {
	case LinearOrigin:
		return []int{1}
	case Quadratic:
		return []int{0, 1, 2}
	}
	return []int{0, 1}
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

// design is one Householder QR factorisation (gonum mat.QR) of the
// weighted, column-scaled, augmented matrix [√W·X·D | √W·y·c]. D and c are
// powers of two that bring every column to unit norm order (exact, and R
// stays well scaled). Because Householder QR treats the columns left to
// right, the leading j columns of R̃ are the QR factor of the first j
// regressors alone, and R̃[:j, k] = (Qᵀ√W·y·c)[:j]: one factorisation of
// [1, x, x²] serves the line and the quadratic, and one of [x, 1, x²] the
// origin model, the line and the quadratic (for Mandel's test and the
// intercept test).
type design struct {
	n, k    int       // readings; regressor columns (the y column is k)
	pow     [3]int    // power of x in each regressor column
	data    []float64 // the scaled n×(k+1) matrix, row-major
	scale   [4]float64
	r       [4][4]float64 // R̃, (k+1)×(k+1)
	x, y, w []float64
}

// newDesign factorises [√W·X | √W·y] for regressor columns with the given
// powers of x. Preconditions: n > 0, w > 0, every entry finite.
func newDesign(pow []int, x, y, w []float64) (*design, error) {
	n, k := len(x), len(pow)
	c := k + 1
	d := &design{n: n, k: k, x: x, y: y, w: w, data: make([]float64, n*c)}
	copy(d.pow[:], pow)
	var norms [4]float64
	for i := range x {
		sw := math.Sqrt(w[i])
		for j, pw := range pow {
			a := sw
			switch pw {
			case 1:
				a *= x[i]
			case 2:
				a *= x[i] * x[i]
			}
			d.data[i*c+j] = a
			norms[j] += a * a
		}
		a := sw * y[i]
		d.data[i*c+k] = a
		norms[k] += a * a
	}
	for j := 0; j < c; j++ {
		if math.IsNaN(norms[j]) || math.IsInf(norms[j], 0) {
			return nil, inputErr("points", "values are outside the numerically usable range")
		}
		e := 0
		if norms[j] > 0 {
			_, e = math.Frexp(math.Sqrt(norms[j]))
		}
		d.scale[j] = math.Ldexp(1, -e)
	}
	for i := 0; i < n; i++ {
		for j := 0; j < c; j++ {
			d.data[i*c+j] *= d.scale[j]
		}
	}
	var qr mat.QR
	qr.Factorize(mat.NewDense(n, c, d.data))
	rt := mat.NewDense(n, c, nil)
	qr.RTo(rt)
	for j := 0; j < c && j < n; j++ {
		for l := j; l < c; l++ {
			d.r[j][l] = rt.At(j, l)
		}
	}
	return d, nil
}

// solveLSQ solves min Σwᵢ(yᵢ − Xᵢβ)² for the model by QR (see design and
// design.fit). The weights are used as given (no normalisation): scaling
// them by k scales s by √k and leaves β, s²(XᵀWX)⁻¹, the leverages and the
// studentised residuals unchanged.
func solveLSQ(model Model, x, y, w []float64) (lsq, error) {
	if len(x) <= nParams(model) {
		return lsq{}, inputErr("points", "%d readings for %d coefficients", len(x), nParams(model))
	}
	d, err := newDesign(powers(model), x, y, w)
	if err != nil {
		return lsq{}, err
	}
	return d.fit(model)
}

// fit solves the model whose regressors are the leading p columns of the
// design: β = D·R⁻¹z/c with R = R̃[:p,:p] and z = R̃[:p,k], then one step
// of iterative refinement: the residuals e = y − Xβ are accumulated in
// double-double arithmetic and the correction δ = R⁻¹R⁻ᵀ·(√W·X·D)ᵀ(√W·e·c)
// is added (corrected semi-normal equations with the QR factor, Björck,
// Numerical Methods for Least Squares Problems §2.9; XᵀWX is never formed).
// (XᵀWX)⁻¹ = D·R⁻¹R⁻ᵀ·D and hᵢ = ‖(√wᵢ·Xᵢ·D)R⁻¹‖².
//
// Preconditions: n > p; the model's powers are the first p design columns.
// A numerically rank-deficient R (|R_jj| ≤ 1e-11·max|R_ll|) is an
// *InputError.
func (d *design) fit(model Model) (lsq, error) {
	mp := powers(model)
	p, n, c := len(mp), d.n, d.k+1
	if n <= p || p > d.k {
		return lsq{}, inputErr("points", "%d readings for %d coefficients", n, p)
	}
	// perm[j] is the design column of coefficient j.
	var perm [3]int
	for j, pw := range mp {
		perm[j] = -1
		for l := 0; l < p; l++ {
			if d.pow[l] == pw {
				perm[j] = l
			}
		}
		if perm[j] < 0 {
			return lsq{}, inputErr("options.model", "model %s is not a leading part of the design", model)
		}
	}
	var rinv [3][3]float64
	maxd := 0.0
	for j := 0; j < p; j++ {
		maxd = math.Max(maxd, math.Abs(d.r[j][j]))
	}
	for j := 0; j < p; j++ {
		if !(math.Abs(d.r[j][j]) > 1e-11*maxd) {
			return lsq{}, inputErr("points", "the concentrations are too close together to fit %s (numerically singular)", model)
		}
	}
	for j := p - 1; j >= 0; j-- {
		rinv[j][j] = 1 / d.r[j][j]
		for l := j + 1; l < p; l++ {
			var s float64
			for m := j + 1; m <= l; m++ {
				s += d.r[j][m] * rinv[m][l]
			}
			rinv[j][l] = -s / d.r[j][j]
		}
	}
	// β' in scaled column coordinates.
	var bc [3]float64
	for j := 0; j < p; j++ {
		var s float64
		for l := j; l < p; l++ {
			s += rinv[j][l] * d.r[l][d.k]
		}
		bc[j] = s
	}
	out := lsq{p: p, df: n - p, beta: make([]float64, p), xtwx: make([]float64, p*p)}
	buf := make([]float64, 3*n)
	out.fitted, out.resid, out.lev = buf[:n:n], buf[n:2*n:2*n], buf[2*n:]
	unscale := func() {
		for j := 0; j < p; j++ {
			l := perm[j]
			out.beta[j] = bc[l] * d.scale[l] / d.scale[d.k]
		}
	}
	unscale()
	// One refinement step: g = A_pᵀ(√W·e·c), u = R⁻ᵀg, δ' = R⁻¹u.
	var g [3]float64
	for i := 0; i < n; i++ {
		e := residualDD(model, out.beta, d.x[i], d.y[i])
		out.resid[i] = e
		re := math.Sqrt(d.w[i]) * e * d.scale[d.k]
		for l := 0; l < p; l++ {
			g[l] += d.data[i*c+l] * re
		}
	}
	var u [3]float64
	for l := 0; l < p; l++ {
		var s float64
		for m := 0; m <= l; m++ {
			s += rinv[m][l] * g[m]
		}
		u[l] = s
	}
	for j := 0; j < p; j++ {
		var s float64
		for l := j; l < p; l++ {
			s += rinv[j][l] * u[l]
		}
		bc[j] += s
	}
	unscale()
	for j := 0; j < p; j++ {
		for l := 0; l < p; l++ {
			cj, cl := perm[j], perm[l]
			var s float64
			for m := max(cj, cl); m < p; m++ {
				s += rinv[cj][m] * rinv[cl][m]
			}
			out.xtwx[j*p+l] = s * d.scale[cj] * d.scale[cl]
		}
	}
	var sumw, swy float64
	for i := 0; i < n; i++ {
		e := residualDD(model, out.beta, d.x[i], d.y[i])
		out.fitted[i] = d.y[i] - e
		out.resid[i] = e
		out.ssr += d.w[i] * e * e
		sumw += d.w[i]
		swy += d.w[i] * d.y[i]
		var h float64
		for l := 0; l < p; l++ {
			var s float64
			for m := 0; m <= l; m++ {
				s += d.data[i*c+m] * rinv[m][l]
			}
			h += s * s
		}
		out.lev[i] = h
	}
	out.s = math.Sqrt(out.ssr / float64(out.df))
	var tss float64
	if model == LinearOrigin {
		for i := 0; i < n; i++ {
			tss += d.w[i] * d.y[i] * d.y[i]
		}
	} else {
		my := swy / sumw
		for i := 0; i < n; i++ {
			tss += d.w[i] * (d.y[i] - my) * (d.y[i] - my)
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
