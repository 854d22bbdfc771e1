package calib

import (
	"math"

	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
)

// lsq is a weighted least-squares solution.
type lsq struct {
	p     int
	beta  []float64 // coefficients, model-equation order
	xtwx  []float64 // (XᵀWX)⁻¹, p×p row-major, model-equation order
	s     float64   // √(Σw e²/df)
	ssr   float64   // Σw e²
	df    int
	r2    float64
	resid []float64 // y − fitted value
	lev   []float64 // diagonal of the weighted hat matrix
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

// design is one Householder QR factorisation (gonum's LAPACK Dgeqrf) of the
// weighted, column-scaled, augmented matrix [√W·X·D | √W·y·c]. D and c are
// powers of two that bring every column to unit norm order (exact, and R
// stays well scaled). Because Householder QR treats the columns left to
// right, the leading j columns of R̃ are the QR factor of the first j
// regressors alone, and R̃[:j, k] = (Qᵀ√W·y·c)[:j]: one factorisation of
// [1, x, x²] serves the line and the quadratic, and one of [x, 1, x²] the
// origin model, the line and the quadratic (for Mandel's test and the
// intercept test).
//
// Only R̃ is needed (rank is judged from its diagonal in solve), so the
// factorisation is called on the caller's workspace directly rather than
// through mat.QR, which would also estimate a condition number and
// allocate on every call.
type design struct {
	n, k    int       // readings; regressor columns (the y column is k)
	pow     [3]int    // power of x in each regressor column
	data    []float64 // the scaled n×(k+1) matrix, row-major (kept: solve reads its rows)
	scale   [4]float64
	r       [4][4]float64 // R̃, (k+1)×(k+1)
	x, y, w []float64
	scratch []float64 // n residuals for fitSSR
}

// designLen is the length of the workspace init needs for n readings and k
// regressor columns: the scaled matrix, its copy that Dgeqrf overwrites,
// Dgeqrf's reflector scales and work, and n residuals for fitSSR.
func designLen(n, k int) int {
	c := k + 1
	return 2*n*c + 2*c + n
}

// init factorises [√W·X | √W·y] for regressor columns with the given
// powers of x into d, using buf (of length designLen, or nil to allocate)
// as workspace; d.data points into buf afterwards. Preconditions:
// n ≥ len(pow)+1, w > 0, every entry finite.
func (d *design) init(pow []int, x, y, w, buf []float64) error {
	n, k := len(x), len(pow)
	c := k + 1
	if len(buf) < designLen(n, k) {
		buf = make([]float64, designLen(n, k))
	}
	*d = design{n: n, k: k, x: x, y: y, w: w, data: buf[: n*c : n*c]}
	fact := buf[n*c : 2*n*c : 2*n*c]
	tau := buf[2*n*c : 2*n*c+min(n, c) : 2*n*c+min(n, c)]
	work := buf[2*n*c+c : 2*n*c+2*c : 2*n*c+2*c]
	d.scratch = buf[2*n*c+2*c : 2*n*c+2*c+n : 2*n*c+2*c+n]
	copy(d.pow[:], pow)
	var norms [4]float64
	for i := range x {
		sw := math.Sqrt(w[i])
		row := d.data[i*c : i*c+c]
		xi := x[i]
		xp := [3]float64{1, xi, xi * xi} // x to the power 0, 1, 2
		for j, pw := range pow {
			a := sw
			if pw > 0 {
				a *= xp[pw]
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
			return inputErr("points", "values are outside the numerically usable range")
		}
		e := 0
		if norms[j] > 0 {
			_, e = math.Frexp(math.Sqrt(norms[j]))
		}
		d.scale[j] = math.Ldexp(1, -e)
	}
	sc := d.scale[:c]
	for o := 0; o < n*c; o += c {
		row, frow := d.data[o:o+c], fact[o:o+c]
		for j, s := range sc {
			v := row[j] * s
			row[j], frow[j] = v, v
		}
	}
	lapack64.Geqrf(blas64.General{Rows: n, Cols: c, Stride: c, Data: fact}, tau, work, len(work))
	for j := 0; j < c && j < n; j++ {
		for l := j; l < c; l++ {
			d.r[j][l] = fact[j*c+l]
		}
	}
	return nil
}

// solveLSQ solves min Σwᵢ(yᵢ − Xᵢβ)² for the model by QR (see design and
// design.fit). The weights are used as given (no normalisation): scaling
// them by k scales s by √k and leaves β, s²(XᵀWX)⁻¹, the leverages and the
// studentised residuals unchanged.
func solveLSQ(model Model, x, y, w []float64) (lsq, error) {
	if len(x) <= nParams(model) {
		return lsq{}, inputErr("points", "%d readings for %d coefficients", len(x), nParams(model))
	}
	var d design
	if err := d.init(powers(model), x, y, w, nil); err != nil {
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
	return d.fitInto(model, nil)
}

// fitLen is the length of the arrays of a solution with p coefficients
// and n readings: β, (XᵀWX)⁻¹, residuals and leverages.
func fitLen(p, n int) int { return p + p*p + 2*n }

// fitInto is fit with the solution's arrays in buf (of length fitLen, or
// nil to allocate).
func (d *design) fitInto(model Model, buf []float64) (lsq, error) {
	p, n := nParams(model), d.n
	if len(buf) < fitLen(p, n) {
		buf = make([]float64, fitLen(p, n))
	}
	out := lsq{beta: buf[:p:p], xtwx: buf[p : p+p*p : p+p*p]}
	out.resid, out.lev = buf[p+p*p:p+p*p+n:p+p*p+n], buf[p+p*p+n:p+p*p+2*n:p+p*p+2*n]
	if err := d.solve(model, &out, true); err != nil {
		return lsq{}, err
	}
	return out, nil
}

// fitSSR is fit for a caller that needs only Σw e² (Mandel's test): the
// same arithmetic, so the same value, without the covariance and leverages
// and without allocating (the residuals go to the design's scratch).
func (d *design) fitSSR(model Model) (float64, error) {
	var beta [3]float64
	out := lsq{beta: beta[:nParams(model)]}
	if err := d.solve(model, &out, false); err != nil {
		return 0, err
	}
	return out.ssr, nil
}

// solve is fit into out, whose beta has length p; with full, xtwx (p×p),
// resid and lev (n each) are filled too.
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
	x, y, w := d.x[:n], d.y[:n], d.w[:n]
	e := d.scratch[:n]
	if full {
		e = out.resid[:n]
	}
	// One refinement step: g = A_pᵀ(√W·e·c), u = R⁻ᵀg, δ' = R⁻¹u.
	residualsDD(model, beta, x, y, e)
	// g is accumulated reading by reading, the same sums in the same order
	// for every p; p = 2 and 3 share a loop over rows of fixed length three
	// (each row has c ≥ p+1 ≥ 3 entries).
	var g [3]float64
	yc := d.scale[d.k]
	data := d.data[:n*c]
	switch p {
	case 2, 3:
		for i, o := 0, 0; i < n; i, o = i+1, o+c {
			re := math.Sqrt(w[i]) * e[i] * yc
			row := data[o : o+3 : o+3]
			g[0] += row[0] * re
			g[1] += row[1] * re
			if p == 3 {
				g[2] += row[2] * re
			}
		}
	default:
		for i := 0; i < n; i++ {
			re := math.Sqrt(w[i]) * e[i] * yc
			row := data[i*c : i*c+p]
			for l := range row {
				g[l] += row[l] * re
			}
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
	residualsDD(model, beta, x, y, e)
	var sumw, swy, ssr float64
	for i := 0; i < n; i++ {
		ssr += w[i] * e[i] * e[i]
		sumw += w[i]
		swy += w[i] * y[i]
	}
	if full {
		lev := out.lev[:n]
		// hᵢ = Σ_l sₗ², sₗ = Σ_{m≤l} row[m]·R⁻¹[m][l]. The loops for p = 2
		// and 3 write the sums out; starting them at their first term
		// instead of at 0 can only turn a −0 into +0 in sₗ, which sₗ² does
		// not see.
		switch p {
		case 2, 3:
			i00, i01, i11 := rinv[0][0], rinv[0][1], rinv[1][1]
			i02, i12, i22 := rinv[0][2], rinv[1][2], rinv[2][2]
			for i, o := 0, 0; i < n; i, o = i+1, o+c {
				row := data[o : o+3 : o+3]
				s0 := row[0] * i00
				s1 := row[0] * i01
				s1 += row[1] * i11
				h := s0 * s0
				h += s1 * s1
				if p == 3 {
					s2 := row[0] * i02
					s2 += row[1] * i12
					s2 += row[2] * i22
					h += s2 * s2
				}
				lev[i] = h
			}
		default:
			for i := 0; i < n; i++ {
				row := data[i*c : i*c+p]
				var h float64
				for l := 0; l < p; l++ {
					var s float64
					for m := 0; m <= l; m++ {
						s += row[m] * rinv[m][l]
					}
					h += s * s
				}
				lev[i] = h
			}
		}
	}
	out.ssr = ssr
	out.s = math.Sqrt(ssr / float64(out.df))
	var tss float64
	if model == LinearOrigin {
		for i := 0; i < n; i++ {
			tss += w[i] * y[i] * y[i]
		}
	} else {
		my := swy / sumw
		for i := 0; i < n; i++ {
			tss += w[i] * (y[i] - my) * (y[i] - my)
		}
	}
	if !(tss > 0) || math.IsInf(tss, 0) || math.IsInf(ssr, 0) || math.IsNaN(ssr) {
		return inputErr("points", "the responses cannot be fitted (no spread, or outside the numerically usable range)")
	}
	out.r2 = 1 - ssr/tss
	return nil
}

// residualsDD sets e[i] = y[i] − Σβⱼvⱼ(x[i]) accumulated in double-double
// arithmetic (products split exactly with FMA, sums with TwoSum), so that
// the residual of a near-exact fit keeps its digits. The model is resolved
// once for the whole loop.
func residualsDD(model Model, beta, x, y, e []float64) {
	x, y = x[:len(e)], y[:len(e)]
	switch model {
	case LinearOrigin:
		b1 := beta[0]
		for i := range e {
			hi, lo := ddSub(y[i], 0, b1, x[i])
			e[i] = hi + lo
		}
	case Quadratic:
		b0, b1, b2 := beta[0], beta[1], beta[2]
		for i := range e {
			xi := x[i]
			x2 := xi * xi
			x2e := math.FMA(xi, xi, -x2) // x² = x2 + x2e exactly
			hi, lo := ddSub1(y[i], 0, b0)
			hi, lo = ddSub(hi, lo, b1, xi)
			hi, lo = ddSub(hi, lo, b2, x2)
			hi, lo = ddSub(hi, lo, b2, x2e)
			e[i] = hi + lo
		}
	default:
		b0, b1 := beta[0], beta[1]
		for i := range e {
			hi, lo := ddSub1(y[i], 0, b0)
			hi, lo = ddSub(hi, lo, b1, x[i])
			e[i] = hi + lo
		}
	}
}

// ddSub returns (hi, lo) − b·v in double-double arithmetic: the product is
// split exactly with FMA, the sum with TwoSum.
func ddSub(hi, lo, b, v float64) (float64, float64) {
	// The conversion rounds b·v to float64 and so forbids the compiler to
	// fuse it into hi − b·v (the Go spec allows fusion across statements;
	// arm64, or amd64 built with GOAMD64=v3, would do it), which would break
	// the exact split below.
	p := float64(b * v)
	pe := math.FMA(b, v, -p) // b·v = p + pe exactly
	s := hi - p
	bb := s - hi
	e := (hi - (s - bb)) + (-p - bb) // TwoSum(hi, −p) error
	return s, lo + (e - pe)
}

// ddSub1 is ddSub(hi, lo, b, 1) without the FMA: b·1 = b exactly, and the
// product's error term FMA(b, 1, −b) equals b − b (+0, or NaN when b is
// infinite or NaN).
func ddSub1(hi, lo, b float64) (float64, float64) {
	pe := b - b
	s := hi - b
	bb := s - hi
	e := (hi - (s - bb)) + (-b - bb)
	return s, lo + (e - pe)
}
