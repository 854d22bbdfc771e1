package calib

import (
	"math"
	"sync"

	"gonum.org/v1/gonum/blas/blas64"
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
	data    []float64 // the scaled n×(k+1) matrix, row-major (in ws until release)
	scale   [4]float64
	r       [4][4]float64 // R̃, (k+1)×(k+1)
	x, y, w []float64
	ws      *qrWork
}

// qrWork is the reusable workspace of one factorisation: the matrix handed
// to mat.QR, the QR itself and the R̃ it is read into. Fits are short and
// frequent, so the workspace is pooled rather than allocated per fit.
type qrWork struct {
	qr    mat.QR
	a, rt mat.Dense
	data  []float64
}

var qrPool = sync.Pool{New: func() any { return new(qrWork) }}

// newDesign factorises [√W·X | √W·y] for regressor columns with the given
// powers of x. Preconditions: n > 0, w > 0, every entry finite. The caller
// calls release when done with the design.
func newDesign(pow []int, x, y, w []float64) (*design, error) {
	d := new(design)
	if err := d.init(pow, x, y, w); err != nil {
		return nil, err
	}
	return d, nil
}

// init is newDesign into a caller-provided design (which may live on the
// caller's stack).
func (d *design) init(pow []int, x, y, w []float64) error {
	n, k := len(x), len(pow)
	c := k + 1
	ws := qrPool.Get().(*qrWork)
	if cap(ws.data) < n*c {
		ws.data = make([]float64, n*c)
	}
	*d = design{n: n, k: k, x: x, y: y, w: w, data: ws.data[:n*c], ws: ws}
	copy(d.pow[:], pow)
	var norms [4]float64
	for i := range x {
		sw := math.Sqrt(w[i])
		row := d.data[i*c : i*c+c]
		for j, pw := range pow {
			a := sw
			switch pw {
			case 1:
				a *= x[i]
			case 2:
				a *= x[i] * x[i]
			}
			row[j] = a
			norms[j] += a * a
		}
		a := sw * y[i]
		row[k] = a
		norms[k] += a * a
	}
	for j := 0; j < c; j++ {
		if math.IsNaN(norms[j]) || math.IsInf(norms[j], 0) {
			d.release()
			return inputErr("points", "values are outside the numerically usable range")
		}
		e := 0
		if norms[j] > 0 {
			_, e = math.Frexp(math.Sqrt(norms[j]))
		}
		d.scale[j] = math.Ldexp(1, -e)
	}
	for i := 0; i < n; i++ {
		row := d.data[i*c : i*c+c]
		for j := range row {
			row[j] *= d.scale[j]
		}
	}
	ws.a.SetRawMatrix(blas64.General{Rows: n, Cols: c, Stride: c, Data: d.data})
	ws.qr.Factorize(&ws.a)
	ws.rt.Reset()
	ws.qr.RTo(&ws.rt)
	raw := ws.rt.RawMatrix()
	for j := 0; j < c && j < n; j++ {
		for l := j; l < c; l++ {
			d.r[j][l] = raw.Data[j*raw.Stride+l]
		}
	}
	return nil
}

// release returns the design's workspace to the pool; d.data is not valid
// afterwards.
func (d *design) release() {
	if d.ws != nil {
		qrPool.Put(d.ws)
		d.ws, d.data = nil, nil
	}
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
	defer d.release()
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
	p, n := nParams(model), d.n
	buf := make([]float64, p+p*p+3*n)
	out := lsq{beta: buf[:p:p], xtwx: buf[p : p+p*p : p+p*p]}
	out.fitted, out.resid, out.lev = buf[p+p*p:p+p*p+n:p+p*p+n], buf[p+p*p+n:p+p*p+2*n:p+p*p+2*n], buf[p+p*p+2*n:]
	if err := d.solve(model, &out, true); err != nil {
		return lsq{}, err
	}
	return out, nil
}

// fitSSR is fit for a caller that needs only Σw e² (Mandel's test): the
// same arithmetic, so the same value, without the covariance, fitted values
// and leverages and without allocating.
func (d *design) fitSSR(model Model) (float64, error) {
	var beta [3]float64
	out := lsq{beta: beta[:nParams(model)]}
	if err := d.solve(model, &out, false); err != nil {
		return 0, err
	}
	return out.ssr, nil
}

// solve is fit into out, whose beta has length p; with full, xtwx (p×p),
// fitted, resid and lev (n each) are filled too.
func (d *design) solve(model Model, out *lsq, full bool) error {
	mp := powers(model)
	p, n, c := len(mp), d.n, d.k+1
	if n <= p || p > d.k {
		return inputErr("points", "%d readings for %d coefficients", n, p)
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
			return inputErr("options.model", "model %s is not a leading part of the design", model)
		}
	}
	var rinv [3][3]float64
	maxd := 0.0
	for j := 0; j < p; j++ {
		maxd = max(maxd, math.Abs(d.r[j][j]))
	}
	for j := 0; j < p; j++ {
		if !(math.Abs(d.r[j][j]) > 1e-11*maxd) {
			return inputErr("points", "the concentrations are too close together to fit %s (numerically singular)", model)
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
	out.p, out.df = p, n-p
	beta := out.beta[:p]
	for j := 0; j < p; j++ {
		l := perm[j]
		beta[j] = bc[l] * d.scale[l] / d.scale[d.k]
	}
	// One refinement step: g = A_pᵀ(√W·e·c), u = R⁻ᵀg, δ' = R⁻¹u.
	var g [3]float64
	for i := 0; i < n; i++ {
		e := residualDD(model, beta, d.x[i], d.y[i])
		re := math.Sqrt(d.w[i]) * e * d.scale[d.k]
		row := d.data[i*c : i*c+p]
		for l := range row {
			g[l] += row[l] * re
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
	for j := 0; j < p; j++ {
		l := perm[j]
		beta[j] = bc[l] * d.scale[l] / d.scale[d.k]
	}
	if full {
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
	}
	var sumw, swy, ssr float64
	for i := 0; i < n; i++ {
		e := residualDD(model, beta, d.x[i], d.y[i])
		ssr += d.w[i] * e * e
		sumw += d.w[i]
		swy += d.w[i] * d.y[i]
		if !full {
			continue
		}
		out.fitted[i] = d.y[i] - e
		out.resid[i] = e
		row := d.data[i*c : i*c+p]
		var h float64
		for l := 0; l < p; l++ {
			var s float64
			for m := 0; m <= l; m++ {
				s += row[m] * rinv[m][l]
			}
			h += s * s
		}
		out.lev[i] = h
	}
	out.ssr = ssr
	out.s = math.Sqrt(ssr / float64(out.df))
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
	if !(tss > 0) || math.IsInf(tss, 0) || math.IsInf(ssr, 0) || math.IsNaN(ssr) {
		return inputErr("points", "the responses cannot be fitted (no spread, or outside the numerically usable range)")
	}
	out.r2 = 1 - ssr/tss
	return nil
}

// residualDD returns y − Σβⱼvⱼ(x) accumulated in double-double arithmetic
// (products split exactly with FMA, sums with TwoSum), so that the residual
// of a near-exact fit keeps its digits.
func residualDD(model Model, beta []float64, x, y float64) float64 {
	hi, lo := y, 0.0
	switch model {
	case LinearOrigin:
		hi, lo = ddSub(hi, lo, beta[0], x)
	case Quadratic:
		x2 := x * x
		x2e := math.FMA(x, x, -x2) // x² = x2 + x2e exactly
		hi, lo = ddSub(hi, lo, beta[0], 1)
		hi, lo = ddSub(hi, lo, beta[1], x)
		hi, lo = ddSub(hi, lo, beta[2], x2)
		hi, lo = ddSub(hi, lo, beta[2], x2e)
	default:
		hi, lo = ddSub(hi, lo, beta[0], 1)
		hi, lo = ddSub(hi, lo, beta[1], x)
	}
	return hi + lo
}

// ddSub returns (hi, lo) − b·v in double-double arithmetic: the product is
// split exactly with FMA, the sum with TwoSum.
func ddSub(hi, lo, b, v float64) (float64, float64) {
	p := b * v
	pe := math.FMA(b, v, -p) // b·v = p + pe exactly
	s := hi - p
	bb := s - hi
	e := (hi - (s - bb)) + (-p - bb) // TwoSum(hi, −p) error
	return s, lo + (e - pe)
}
