package calib

import (
	"fmt"
	"math"
	"sync"

	"gonum.org/v1/gonum/floats"
)

// Curve is a model for non-linear least squares: a response function of one
// predictor x and NumParams parameters β, with its analytic Jacobian.
//
// Eval returns f(x; β) and, when grad is not nil, sets grad[j] = ∂f/∂βⱼ at
// (x, β). It must not keep beta or grad.
type Curve interface {
	NumParams() int
	Eval(x float64, beta, grad []float64) float64
}

// Outcome is how SolveNLLS ended. Every outcome comes with the best
// parameters found; only Converged parameters are a least-squares solution
// by the stated criteria, and only Converged and Stalled results carry a
// covariance.
type Outcome int

// The outcomes of SolveNLLS.
const (
	// Converged: one of the convergence criteria of NLLSOptions held.
	Converged Outcome = iota + 1
	// Stalled: no step could lower the weighted sum of squares although
	// no criterion held (the damped step became negligible against β,
	// ‖D·δ‖ ≤ 4ε·‖D·β‖). The parameters are the best found; treat them
	// with suspicion.
	Stalled
	// IterationLimit: MaxIter iterations ran without meeting a criterion.
	IterationLimit
	// Singular: the weighted Jacobian at the final parameters is
	// numerically rank-deficient, so some combination of the free
	// parameters is not determined by the data and no covariance exists:
	// with unit-norm columns some |R_jj| of its QR factor ≤ 1e-12·max|R_ll|,
	// or some free parameter has lost its effect on the curve,
	// ‖√W·Jⱼ‖·|βⱼ| ≤ 1e-12·‖√W·y‖ (changing βⱼ by all of its value would
	// move the fitted values by less than 1e-12 of the data: the fit has run
	// onto a plateau, such as an exponential rate so large that every
	// reading sits on the asymptote; a parameter that is exactly 0 is
	// judged so too).
	Singular
)

func (o Outcome) String() string {
	switch o {
	case Converged:
		return "converged"
	case Stalled:
		return "stalled"
	case IterationLimit:
		return "iteration_limit"
	case Singular:
		return "singular"
	}
	return "unknown"
}

// NLLSOptions controls SolveNLLS. Zero values take the stated defaults.
//
// Convergence criteria (any one ends the iteration with Converged; the
// first three follow MINPACK's lmder, Moré 1978):
//   - relative reduction in SS: |SS_old − SS_new| ≤ FTol·SS_old and the
//     reduction predicted by the linearised model ≤ FTol·SS_old (and the
//     ratio of the two ≤ 2), for a trial step whether or not it was taken;
//   - relative step: ‖D·δ‖ ≤ XTol·‖D·β‖ for an accepted step δ, D the
//     scaling below;
//   - gradient: max_j |Jⱼᵀ·W·r| / (‖√W·Jⱼ‖·‖√W·r‖) ≤ GTol over the free
//     parameters not held at a bound (the cosine between the residual and
//     each Jacobian column);
//   - zero residual: SS ≤ 1e-300 (an exact fit).
type NLLSOptions struct {
	Start []float64 // starting parameters, NumParams of them (required)
	// Fixed, when not nil, holds parameters at their Start value: Fixed[j]
	// true means βⱼ is not fitted and does not count against the degrees of
	// freedom.
	Fixed []bool
	// Lower and Upper, when not nil, bound each parameter (±Inf for none).
	// Start must lie within them. A trial step is projected onto the box;
	// a free parameter on a bound whose gradient points out of the box is
	// held for that iteration.
	Lower, Upper []float64
	MaxIter      int     // iterations (Jacobian evaluations); default 200
	FTol         float64 // default 1e-12
	XTol         float64 // default 1e-10
	GTol         float64 // default 1e-10
}

// NLLSResult is the outcome of SolveNLLS. Parameter arrays are in the
// curve's order, fixed parameters included (with zero standard error and
// zero covariance rows).
type NLLSResult struct {
	Params     []float64
	Outcome    Outcome
	Criterion  string      // with Converged: which criterion held; else why it stopped
	Iterations int         // Jacobian evaluations
	SSR        float64     // Σwᵢ·rᵢ², rᵢ = yᵢ − f(xᵢ; β)
	DF         int         // n − number of free parameters
	ResidualSD float64     // s = √(SSR/DF), on the scale of the weights given
	Covariance [][]float64 // s²(JᵀWJ)⁻¹ over the free parameters; nil if Singular or not converged/stalled
	StdErrors  []float64   // √diag(Covariance); nil with Covariance
	Residuals  []float64   // yᵢ − f(xᵢ; β)
	AtBound    []bool      // parameter on a bound at the end (its covariance is conditional on that)
}

// SolveNLLS minimises SS(β) = Σwᵢ(yᵢ − f(xᵢ; β))² by Levenberg–Marquardt
// with Moré's scaling (Moré, "The Levenberg–Marquardt algorithm:
// implementation and theory", 1978): each trial step solves
//
//	min ‖ [√W·J·D⁻¹; √λ·I]·z + [−√W·r; 0] ‖,  δ = D⁻¹z,
//
// (in parameter units, min ‖[R; √λ·D]·δ − [Qᵀ·√W·r; 0]‖) by one Householder
// QR factorisation of [√W·J | √W·r] per iteration (householderQR,
// allocation-free), then Givens rotations of √λ·D into its R per trial λ
// (MINPACK's qrsolv), where r is the
// residual vector, J the analytic Jacobian over the free parameters and
// D = diag(dⱼ), dⱼ the largest ‖√W·Jⱼ‖ seen so far (so the damping is
// invariant to rescaling the parameters). λ starts at 1e-3 and follows
// Nielsen's rule (1999): after a step with gain ratio ρ > 0 (actual over
// predicted reduction) it is multiplied by max(1/3, 1 − (2ρ − 1)³), after a
// rejected step by 2, 4, 8, …. A run that ends Singular or
// IterationLimit is tried once more from the same start with λ starting at
// 100 (short, gradient-like first steps; a poor start then does not run
// onto a plateau: NIST's BoxBOD from its first start); the second try
// replaces the first only when it converges, and its Criterion says so.
// The covariance at the solution is
// s²(JᵀWJ)⁻¹, s² = SS/(n − p_free), from the QR factor of √W·J with
// unit-norm columns (never the normal equations).
//
// Readings that share an x are fitted as one row per distinct x, with
// their summed weight at their weighted mean response, and their
// pure-error sum of squares added back wherever the whole sum counts (see
// replicates): the same problem with fewer rows to evaluate and
// factorise.
//
// Preconditions (an *InputError otherwise): len(x) = len(y) = n, w nil
// (unit weights) or n positive finite weights, finite data, n greater than
// the number of free parameters, a finite model and Jacobian at Start.
// Every other ending is a typed Outcome, never an error: the caller reads
// Outcome before using the parameters.
func SolveNLLS(c Curve, x, y, w []float64, opt NLLSOptions) (NLLSResult, error) {
	return solveNLLS(c, x, nil, y, w, opt, nil)
}

// solveNLLS is SolveNLLS given lx[i] = ln x[i] (nil: computed here when
// the curve evaluates in batches) and the readings' replicates (nil:
// grouped here).
func solveNLLS(c Curve, x, lx, y, w []float64, opt NLLSOptions, rep *replicates) (NLLSResult, error) {
	p := c.NumParams()
	n := len(x)
	if err := checkNLLSInput(p, x, y, w, &opt); err != nil {
		return NLLSResult{}, err
	}
	k := 0
	for j := 0; j < p; j++ {
		if opt.Fixed == nil || !opt.Fixed[j] {
			k++
		}
	}
	if n <= k {
		return NLLSResult{}, inputErr("points", "%d readings for %d free parameters", n, k)
	}
	if rep == nil {
		rep = groupReplicates(x, lx, y, w, nil)
	}
	if len(rep.x) <= k {
		// No replicates, or too few levels to leave the reduced problem
		// residual degrees of freedom: the readings are fitted as they
		// are.
		rep = nil
	}
	res, err := solveFrom(c, x, lx, y, w, opt, k, nllsLambda0, rep)
	if err != nil || (res.Outcome != Singular && res.Outcome != IterationLimit) {
		return res, err
	}
	// A second try from the same start with heavy initial damping: its
	// first steps are short, gradient-like ones, which keep a poor start
	// from running onto a plateau or along a valley. Only a converged
	// second try replaces the first outcome.
	again, err := solveFrom(c, x, lx, y, w, opt, k, nllsRetryLambda0, rep)
	if err != nil || again.Outcome != Converged {
		return res, nil
	}
	again.Criterion += fmt.Sprintf(" (on a second try from the start with initial damping λ₀ = %g, after the first ended %s at iteration %d)",
		nllsRetryLambda0, res.Outcome, res.Iterations)
	again.Iterations += res.Iterations
	return again, nil
}

// The initial damping of a solve, and of its second try after a first that
// ended Singular or IterationLimit (see SolveNLLS).
const (
	nllsLambda0      = 1e-3
	nllsRetryLambda0 = 1e2
)

// replicates is the least-squares problem of readings that share their
// concentrations, reduced to one row per distinct x. Readings i at one x
// have the same model value f(x; β) and Jacobian row, so
//
//	Σᵢ wᵢ(yᵢ − f)² = W·(ȳ − f)² + Σᵢ wᵢ(yᵢ − ȳ)²,  W = Σᵢ wᵢ, ȳ = Σᵢ wᵢyᵢ/W,
//
// where the last sum (pure error) does not depend on β, and JᵀWJ and
// JᵀW·r are the same summed over the readings or over the levels with
// weight W at ȳ. The solver therefore iterates on the levels (fewer rows
// to evaluate and factorise; the same steps in exact arithmetic) and
// adds the pure error back wherever the whole sum of squares counts: the
// convergence criteria, SSR, s and the residuals per reading.
type replicates struct {
	x, lx, y, w []float64 // per level: x, ln x (when given), ȳ, W
	level       []int     // level of each reading
	yr          []float64 // the readings' responses
	pe          float64   // Σᵢ wᵢ(yᵢ − ȳ)² over every level
	ynorm       float64   // ‖√W·y‖ over the readings
}

// groupReplicates groups readings with equal x (see replicates). When no
// two readings share an x it returns a replicates with no levels (x nil):
// the readings are fitted as they are. Its memory comes from sc when sc
// is not nil.
func groupReplicates(x, lx, y, w []float64, sc *scratch) *replicates {
	n := len(x)
	var level []int
	var buf []float64
	var r *replicates
	if sc != nil {
		level, buf, r = sc.i.take(n), sc.f.take(4*n), &sc.rep
	} else {
		level, buf, r = make([]int, n), make([]float64, 4*n), new(replicates)
	}
	ux := buf[:0:n]
	var index map[float64]int // for many readings; a linear search otherwise
	if n > 64 {
		index = make(map[float64]int, n)
	}
	last := 0
	for i, v := range x {
		l := -1
		switch {
		case len(ux) > 0 && ux[last] == v:
			l = last // replicates usually follow each other
		case index != nil:
			if j, ok := index[v]; ok {
				l = j
			}
		default:
			for j, u := range ux {
				if u == v {
					l = j
					break
				}
			}
		}
		if l < 0 {
			l = len(ux)
			ux = append(ux, v)
			if index != nil {
				index[v] = l
			}
		}
		level[i], last = l, l
	}
	m := len(ux)
	*r = replicates{}
	if m == n {
		return r
	}
	ym, wm := buf[n:n+m:n+m], buf[2*n:2*n+m:2*n+m]
	// The sums in locals: accumulating through r would make each reading
	// wait for the store of the one before.
	var ynorm, pe float64
	for i, l := range level {
		wi := 1.0
		if w != nil {
			wi = w[i]
		}
		wm[l] += wi
		ym[l] += wi * y[i]
		ynorm += wi * y[i] * y[i]
	}
	for l := range ym {
		ym[l] /= wm[l]
	}
	for i, l := range level {
		wi := 1.0
		if w != nil {
			wi = w[i]
		}
		d := y[i] - ym[l]
		pe += wi * d * d
	}
	*r = replicates{x: ux, y: ym, w: wm, level: level, yr: y, pe: pe, ynorm: math.Sqrt(ynorm)}
	if lx != nil {
		r.lx = buf[3*n : 3*n+m : 3*n+m]
		for i, l := range level {
			r.lx[l] = lx[i]
		}
	}
	return r
}

// solveFrom is one Levenberg–Marquardt run from opt.Start with initial
// damping lambda0, on the readings grouped by rep when it is not nil.
func solveFrom(c Curve, x, lx, y, w []float64, opt NLLSOptions, k int, lambda0 float64, rep *replicates) (NLLSResult, error) {
	var s *nllsState
	if rep != nil {
		s = newNLLSState(c, rep.x, rep.lx, rep.y, rep.w, opt, k)
		s.rep, s.ynorm, s.pe = rep, rep.ynorm, rep.pe
	} else {
		s = newNLLSState(c, x, lx, y, w, opt, k)
	}
	defer s.release()
	s.ss = s.residuals(s.beta, s.r, s.jfull)
	if !s.useJacobian() {
		return NLLSResult{}, inputErr("start", "the model or its Jacobian is not finite at the starting parameters")
	}
	res := s.iterate(lambda0)
	return s.finish(res), nil
}

// nllsScratch is the memory of one solve: the state, its free list and
// flags, and one backing array for every float64 buffer. A finished solve
// returns it to nllsPool (its results never point into it), so that a
// fit allocates little more than what it returns.
type nllsScratch struct {
	s    nllsState
	free [8]int
	act  [8]bool
	buf  []float64
}

var nllsPool = sync.Pool{New: func() any { return new(nllsScratch) }}

// release returns the state's memory to nllsPool, dropping its references
// to the caller's data.
func (s *nllsState) release() {
	sc := s.scratch
	buf := sc.buf
	*sc = nllsScratch{buf: buf}
	nllsPool.Put(sc)
}

// checkNLLSInput validates the data and options and fills the defaults.
func checkNLLSInput(p int, x, y, w []float64, opt *NLLSOptions) error {
	n := len(x)
	if len(y) != n || (w != nil && len(w) != n) {
		return inputErr("points", "x, y and weights differ in length")
	}
	for i := range x {
		if !Finite(x[i], y[i]) {
			return inputErr("points", "reading %d is not finite", i)
		}
		if w != nil && !(w[i] > 0 && !math.IsInf(w[i], 0)) {
			return inputErr("weights", "weight %d is not positive and finite", i)
		}
	}
	if len(opt.Start) != p {
		return inputErr("start", "%d starting values for %d parameters", len(opt.Start), p)
	}
	for _, b := range [...]struct {
		name string
		v    []float64
	}{{"lower", opt.Lower}, {"upper", opt.Upper}} {
		if b.v != nil && len(b.v) != p {
			return inputErr(b.name, "%d bounds for %d parameters", len(b.v), p)
		}
	}
	if opt.Fixed != nil && len(opt.Fixed) != p {
		return inputErr("fixed", "%d flags for %d parameters", len(opt.Fixed), p)
	}
	for j, v := range opt.Start {
		lo, hi := bounds(*opt, j)
		if !Finite(v) || v < lo || v > hi || math.IsNaN(lo) || math.IsNaN(hi) {
			return inputErr("start", "parameter %d: start %v is not finite or lies outside its bounds [%v, %v]", j, v, lo, hi)
		}
	}
	if opt.MaxIter <= 0 {
		opt.MaxIter = 200
	}
	if opt.FTol <= 0 {
		opt.FTol = 1e-12
	}
	if opt.XTol <= 0 {
		opt.XTol = 1e-10
	}
	if opt.GTol <= 0 {
		opt.GTol = 1e-10
	}
	return nil
}

// bounds returns the box of parameter j.
func bounds(opt NLLSOptions, j int) (lo, hi float64) {
	lo, hi = math.Inf(-1), math.Inf(1)
	if opt.Lower != nil {
		lo = opt.Lower[j]
	}
	if opt.Upper != nil {
		hi = opt.Upper[j]
	}
	return lo, hi
}

// batchCurve is a Curve that evaluates every reading in one call, given
// lx[i] = ln x[i] (−Inf at 0, NaN below), which the solver computes once:
// f[i] = f(x[i]; β) and, when jac is not nil, the gradients column-major,
// each row weighted: sw[i]·∂f/∂βⱼ at x[i] in jac[j*n+i]. The logistic
// models implement it, so that what depends only on β (ln c) is computed
// once per pass; other curves are evaluated reading by reading through
// Eval.
type batchCurve interface {
	evalBatch(x, lx, sw, beta, f, jac []float64)
}

// nllsState is the working state of one SolveNLLS call. Every buffer is
// taken once, in newNLLSState (from nllsPool); an iteration allocates
// nothing.
type nllsState struct {
	scratch *nllsScratch // the memory s lives in
	c       Curve
	bc      batchCurve // c as a batchCurve, or nil
	x, y    []float64
	lx      []float64 // ln xᵢ (with bc)
	sw      []float64 // √wᵢ
	opt     NLLSOptions
	free    []int
	beta    []float64 // current parameters (all p)
	trial   []float64
	grad    []float64 // scratch gradient of a Curve without evalBatch
	r       []float64 // √W·(y − f) at beta
	rt      []float64 // the same at trial
	f       []float64 // model values, scratch
	jfull   []float64 // √W·J over all p parameters at beta, column-major (column j at jfull[j*n:])
	jfullT  []float64 // the same at trial (swapped with jfull when a step is taken)
	jac     []float64 // √W·J over the free parameters, column-major: column l at jac[l*n:] (see useJacobian)
	jacBuf  []float64 // jac's own storage when some parameter is fixed
	jacAt   bool      // jac belongs to beta (else jfull does and jac is to be derived)
	d       []float64 // Moré's column scales
	ss      float64
	ynorm   float64     // ‖√W·y‖
	rep     *replicates // the readings, when the rows are their levels; else nil
	pe      float64     // rep's pure-error sum of squares (0 without rep)
	big     []float64   // [√W·J·D⁻¹ | √W·r], n×(k+1) column-major, factorised once per iteration
	rk      []float64   // leading k×k block of R (of √W·J, unscaled), row-major
	qtr     []float64   // first k entries of Qᵀ·√W·r
	small   []float64   // R of [R; √λ·I] (k×k row-major), built by step
	z       []float64   // scratch of the covariance
	wa      []float64   // Qᵀ·√W·r rotated along with small
	sdiag   []float64   // the row of √λ·I being rotated in
	g       []float64   // Jᵀ·W·r over the free parameters
	cn      []float64   // ‖√W·Jⱼ‖² over the free parameters
	delta   []float64   // trial step
	active  []bool      // free parameter held at a bound this iteration
}

func newNLLSState(c Curve, x, lx, y, w []float64, opt NLLSOptions, k int) *nllsState {
	n, p := len(x), c.NumParams()
	k1 := max(k, 1)
	bc, batch := c.(batchCurve)
	// One backing array for every float64 buffer (the covariance at the end
	// reuses big and small).
	tot := 4*n + 3*p + 2*n*p + n*(k+1) + k*k + k1*k1 + 3*k1 + 5*k
	if k < p {
		tot += n * k
	}
	if batch && lx == nil {
		tot += n
	}
	st := nllsPool.Get().(*nllsScratch)
	if cap(st.buf) < tot {
		st.buf = make([]float64, tot)
	}
	buf := st.buf[:tot]
	clear(buf)
	take := func(m int) []float64 {
		v := buf[:m:m]
		buf = buf[m:]
		return v
	}
	s := &st.s
	s.scratch = st
	s.c, s.x, s.y, s.opt = c, x, y, opt
	if p <= len(st.free) {
		s.free, s.active = st.free[:0:p], st.act[:k:k]
	} else {
		s.free, s.active = make([]int, 0, p), make([]bool, k)
	}
	for j := 0; j < p; j++ {
		if opt.Fixed == nil || !opt.Fixed[j] {
			s.free = append(s.free, j)
		}
	}
	s.sw, s.beta, s.trial, s.grad = take(n), take(p), take(p), take(p)
	s.r, s.rt, s.f, s.jfull, s.jfullT = take(n), take(n), take(n), take(n*p), take(n*p)
	if k < p {
		s.jacBuf = take(n * k)
	}
	s.d, s.big, s.rk, s.qtr = take(k), take(n*(k+1)), take(k*k), take(k)
	s.small, s.z, s.wa, s.sdiag, s.g, s.delta = take(k1*k1), take(k1), take(k1), take(k1), take(k), take(k)
	s.cn = take(k)
	copy(s.beta, opt.Start)
	if batch {
		s.bc = bc
		s.lx = lx
		if lx == nil {
			s.lx = take(n)
			for i, v := range x {
				s.lx[i] = math.Log(v)
			}
		}
	}
	for i := range s.sw {
		s.sw[i] = 1
		if w != nil {
			s.sw[i] = math.Sqrt(w[i])
		}
		s.rt[i] = s.sw[i] * y[i] // scratch until the first trial
	}
	s.ynorm = norm2(s.rt)
	return s
}

// eval sets s.f to the model at beta and jf (n×p column-major) to its
// weighted Jacobian √W·J.
func (s *nllsState) eval(beta, jf []float64) {
	if s.bc != nil {
		s.bc.evalBatch(s.x, s.lx, s.sw, beta, s.f, jf)
		return
	}
	n, p := len(s.x), len(beta)
	g := s.grad
	for i, xi := range s.x {
		s.f[i] = s.c.Eval(xi, beta, g)
		for j := 0; j < p; j++ {
			jf[j*n+i] = s.sw[i] * g[j]
		}
	}
}

// residuals sets r = √W·(y − f(x; beta)) and jf to the Jacobian at beta
// (one pass: a step is taken far more often than not, and the next
// iteration then needs no evaluation of its own) and returns Σr², or NaN
// when a value is not finite.
func (s *nllsState) residuals(beta, r, jf []float64) float64 {
	s.eval(beta, jf)
	n := len(s.x)
	f, y, sw := s.f[:n], s.y[:n], s.sw[:n]
	r = r[:n]
	var ss float64
	for i, fi := range f {
		ri := sw[i] * (y[i] - fi)
		r[i] = ri
		ss += ri * ri
	}
	if !Finite(ss) {
		return math.NaN()
	}
	return ss
}

// useJacobian takes the weighted Jacobian over the free parameters from
// s.jfull (which belongs to beta, as do r and ss: s.jac is s.jfull itself
// when every parameter is free, else a copy of its free columns), its
// column norms and the gradient Jᵀ·W·r, and updates the column scales; it
// reports whether everything is finite.
func (s *nllsState) useJacobian() bool {
	n, k := len(s.x), len(s.free)
	r := s.r[:n]
	s.jacAt = true
	if !Finite(s.ss) {
		return false
	}
	if s.jacBuf == nil {
		s.jac = s.jfull[:n*k]
	} else {
		s.jac = s.jacBuf
		for l, j := range s.free {
			copy(s.jac[l*n:l*n+n], s.jfull[j*n:j*n+n])
		}
	}
	for l := range s.free {
		col := s.jac[l*n : l*n+n]
		nn, gl := floats.Dot(col, col), floats.Dot(col, r)
		if !Finite(nn) {
			return false
		}
		s.cn[l], s.g[l] = nn, gl
		s.d[l] = max(s.d[l], math.Sqrt(nn))
	}
	return true
}

// iterate runs the Levenberg–Marquardt loop and returns how it ended.
func (s *nllsState) iterate(lambda0 float64) NLLSResult {
	opt := s.opt
	lambda, nu := lambda0, 2.0
	g, delta := s.g, s.delta
	var res NLLSResult
	for it := 1; ; it++ {
		res.Iterations = it
		ssAll := s.ss + s.pe // the sum of squares over every reading
		if ssAll <= 1e-300 {
			res.Outcome, res.Criterion = Converged, "zero residual"
			return res
		}
		// Gradient (from useJacobian) and the active set.
		gmax := 0.0
		for l, j := range s.free {
			gl, cn := g[l], s.cn[l]
			lo, hi := bounds(opt, j)
			s.active[l] = (s.beta[j] <= lo && gl < 0) || (s.beta[j] >= hi && gl > 0)
			if !s.active[l] && cn > 0 {
				gmax = max(gmax, math.Abs(gl)/math.Sqrt(cn*ssAll))
			}
		}
		if gmax <= opt.GTol {
			res.Outcome, res.Criterion = Converged, "gradient"
			return res
		}
		if it > opt.MaxIter {
			res.Iterations = opt.MaxIter
			res.Outcome, res.Criterion = IterationLimit, "iteration limit reached without meeting a convergence criterion"
			return res
		}
		// Trial steps with increasing damping until one lowers SS.
		s.factor()
		for {
			ok := s.step(lambda, delta)
			var pred, act, ratio float64
			ssNew := math.NaN()
			if ok {
				pred = s.predicted(delta)
				ssNew = s.residuals(s.trial, s.rt, s.jfullT)
			}
			if !math.IsNaN(ssNew) {
				act = s.ss - ssNew
				if pred > 0 {
					ratio = act / pred
				}
				if math.Abs(act) <= opt.FTol*ssAll && pred <= opt.FTol*ssAll && ratio <= 2 {
					if act > 0 {
						s.accept(ssNew)
					}
					res.Outcome, res.Criterion = Converged, "relative reduction in SS"
					return res
				}
			}
			if ratio > 0 {
				sn, bn := s.scaledNorms(delta)
				s.accept(ssNew)
				t := 2*ratio - 1
				lambda *= max(1.0/3, 1-t*t*t)
				lambda = max(lambda, 1e-300)
				nu = 2
				if sn <= opt.XTol*bn {
					if !s.useJacobian() {
						res.Outcome, res.Criterion = Stalled, "the Jacobian is not finite at the accepted parameters"
						return res
					}
					res.Outcome, res.Criterion = Converged, "relative step"
					return res
				}
				break
			}
			sn, bn := s.scaledNorms(delta)
			if ok && sn <= 4*nllsEps*bn || math.IsInf(lambda, 1) || lambda > 1e300 {
				res.Outcome, res.Criterion = Stalled, "no step lowers the sum of squares and no convergence criterion holds"
				return res
			}
			lambda *= nu
			nu *= 2
		}
		if !s.useJacobian() {
			res.Outcome, res.Criterion = Stalled, "the Jacobian is not finite at the accepted parameters"
			return res
		}
	}
}

// nllsEps is the float64 machine epsilon.
const nllsEps = 0x1p-52

// factor computes, once per iteration, the Householder QR factorisation
// of [√W·J | √W·r] (columns of held parameters zeroed): its leading k×k
// block R and the first k entries of Qᵀ·√W·r reduce every trial step of
// the iteration to a k×k problem (as in Moré's lmpar). The scaling D⁻¹ of
// the columns is applied to R afterwards (step): scaling a column scales
// the same column of R and leaves Q as it is.
func (s *nllsState) factor() {
	n, k := len(s.x), len(s.free)
	a := s.big
	copy(a[:n*k], s.jac)
	for l := 0; l < k; l++ {
		if s.active[l] {
			clear(a[l*n : l*n+n])
		}
	}
	copy(a[k*n:k*n+n], s.r)
	householderQR(a, n, k+1, k)
	for j := 0; j < k; j++ {
		for l := j; l < k; l++ {
			s.rk[j*k+l] = a[l*n+j] // the upper triangle: the lower one is never read
		}
		s.qtr[j] = a[k*n+j]
	}
}

// householderQR reduces the first kc columns of the n×m column-major
// matrix a (element (i, j) at a[j*n+i]) to upper-triangular form by
// Householder reflections (LAPACK's dgeqr2 with dlarfg and dlarf), applied
// to all m columns: afterwards a[j*n+i], i ≤ j, holds R (for the first kc
// columns) and Qᵀ times the other columns; what lies below the diagonal is
// scratch. It allocates nothing.
func householderQR(a []float64, n, m, kc int) {
	for j := 0; j < kc && j < n; j++ {
		col := a[j*n : j*n+n]
		nrm := norm2(col[j:])
		if nrm == 0 {
			continue
		}
		alpha := col[j]
		beta := -math.Copysign(nrm, alpha)
		tau := (beta - alpha) / beta
		inv := 1 / (alpha - beta)
		// The reflector is I − τ·u·uᵀ, u = [1; inv·v]: v is left unscaled
		// and inv applied to the products.
		v := col[j+1:]
		col[j] = beta
		for l := j + 1; l < m; l++ {
			cl := a[l*n : l*n+n]
			cr := cl[j+1:]
			w := tau * (cl[j] + inv*floats.Dot(v, cr))
			cl[j] -= w
			floats.AddScaled(cr, -w*inv, v)
		}
	}
}

// norm2 is the Euclidean norm of v: a plain sum of squares, redone scaled
// by the largest |vᵢ| when that sum over- or underflows.
func norm2(v []float64) float64 {
	ss := floats.Dot(v, v)
	if ss > 0x1p-900 && ss < 0x1p900 {
		return math.Sqrt(ss)
	}
	var big float64
	for _, x := range v {
		big = max(big, math.Abs(x))
	}
	if big == 0 || math.IsInf(big, 0) || math.IsNaN(big) {
		return big
	}
	ss = 0
	for _, x := range v {
		t := x / big
		ss += t * t
	}
	return big * math.Sqrt(ss)
}

// scale returns Moré's scale of free parameter l (1 for a column that has
// been zero throughout).
func (s *nllsState) scale(l int) float64 {
	if s.d[l] == 0 {
		return 1
	}
	return s.d[l]
}

// step solves the damped least-squares problem for λ,
// min ‖[R·D⁻¹; √λ·I]·z − [Qᵀ·√W·r; 0]‖, δ = D⁻¹z, in parameter units as
// min ‖[R; √λ·D]·δ − [Qᵀ·√W·r; 0]‖ (zero for held parameters, whose row
// of the diagonal is dⱼ and whose column of R is zero), and sets s.trial
// to β + δ projected onto the box. It reports whether the solve gave
// finite values.
//
// The rows of the diagonal are rotated into R one at a time by Givens
// rotations, as in MINPACK's qrsolv (Moré 1978), which keeps the triangle
// and costs O(k³) with no refactorisation of the 2k×k matrix; back
// substitution then gives δ.
func (s *nllsState) step(lambda float64, delta []float64) bool {
	k := len(s.free)
	sl := math.Sqrt(lambda)
	a := s.small[:k*k] // R, row-major: (l, i) at a[l*k+i], i ≥ l
	copy(a, s.rk)
	wa, sdiag := s.wa[:k], s.sdiag[:k]
	copy(wa, s.qtr)
	delta = delta[:k]
	for j := 0; j < k; j++ {
		for i := j + 1; i < k; i++ {
			sdiag[i] = 0
		}
		sdiag[j] = s.scale(j)
		if !s.active[j] {
			sdiag[j] *= sl
		}
		var qtbpj float64 // the rotated right-hand side of the row (0 at first)
		for l := j; l < k; l++ {
			sd := sdiag[l]
			if sd == 0 {
				continue
			}
			rll := a[l*k+l]
			var cs, sn float64
			if math.Abs(rll) < math.Abs(sd) {
				cot := rll / sd
				sn = 0.5 / math.Sqrt(0.25+0.25*cot*cot)
				cs = sn * cot
			} else {
				tan := sd / rll
				cs = 0.5 / math.Sqrt(0.25+0.25*tan*tan)
				sn = cs * tan
			}
			a[l*k+l] = cs*rll + sn*sd
			wa[l], qtbpj = cs*wa[l]+sn*qtbpj, -sn*wa[l]+cs*qtbpj
			for i := l + 1; i < k; i++ {
				v, t := a[l*k+i], sdiag[i]
				a[l*k+i], sdiag[i] = cs*v+sn*t, -sn*v+cs*t
			}
		}
	}
	for j := k - 1; j >= 0; j-- {
		v := wa[j]
		for l := j + 1; l < k; l++ {
			v -= a[j*k+l] * delta[l]
		}
		delta[j] = v / a[j*k+j]
	}
	copy(s.trial, s.beta)
	for l, j := range s.free {
		v := delta[l]
		if s.active[l] {
			v = 0
		}
		if !Finite(v) {
			return false
		}
		lo, hi := bounds(s.opt, j)
		t := min(max(s.beta[j]+v, lo), hi)
		delta[l] = t - s.beta[j]
		s.trial[j] = t
	}
	return true
}

// predicted is the reduction of SS predicted by the linearised model for
// the (projected) step δ: ‖r‖² − ‖r − J·δ‖² = 2·gᵀδ − ‖J·δ‖², with
// g = Jᵀ·W·r and ‖J·δ‖ = ‖R·δ‖ from the iteration's factor (held
// parameters have δ = 0 and a zeroed column).
func (s *nllsState) predicted(delta []float64) float64 {
	k := len(s.free)
	rk, g := s.rk[:k*k], s.g[:k]
	delta = delta[:k]
	var gd, jd2 float64
	for j, gj := range g {
		gd += gj * delta[j]
		var v float64
		for l := j; l < k; l++ {
			v += rk[j*k+l] * delta[l]
		}
		jd2 += v * v
	}
	return 2*gd - jd2
}

// scaledNorms returns ‖D·δ‖ and ‖D·β‖ over the free parameters.
func (s *nllsState) scaledNorms(delta []float64) (float64, float64) {
	var a, b float64
	for l, j := range s.free {
		a += (s.d[l] * delta[l]) * (s.d[l] * delta[l])
		b += (s.d[l] * s.beta[j]) * (s.d[l] * s.beta[j])
	}
	return math.Sqrt(a), math.Sqrt(b)
}

// accept makes the trial parameters current, with the Jacobian evaluated
// there and their sum of squares ss.
func (s *nllsState) accept(ss float64) {
	s.jacAt = false
	s.jfull, s.jfullT = s.jfullT, s.jfull
	copy(s.beta, s.trial)
	copy(s.r, s.rt)
	s.ss = ss // Σ rtᵢ², as residuals summed it
}

// finish fills the result at the final parameters: SS, s, df, residuals,
// bounds and (when the Jacobian has full rank) the covariance.
func (s *nllsState) finish(res NLLSResult) NLLSResult {
	n, p, k := len(s.x), len(s.beta), len(s.free)
	if s.rep != nil {
		n = len(s.rep.level)
	}
	// The weighted Jacobian matches beta unless the last accepted step ended
	// the loop (by the SS criterion); then it is derived from the Jacobian
	// evaluated with that step's residuals.
	if !s.jacAt && !s.useJacobian() {
		res.Outcome, res.Criterion = Stalled, "the Jacobian is not finite at the final parameters"
	}
	// The result's arrays share one backing array (each capped to its
	// length).
	out := make([]float64, p+n+p*p+p)
	res.Params = out[:p:p]
	copy(res.Params, s.beta)
	res.Residuals = out[p : p+n : p+n]
	if s.rep != nil {
		// yᵢ − f = (yᵢ − ȳ) + (ȳ − f) at the reading's level.
		for i, l := range s.rep.level {
			res.Residuals[i] = (s.rep.yr[i] - s.y[l]) + s.r[l]/s.sw[l]
		}
	} else {
		for i := range s.x {
			res.Residuals[i] = s.r[i] / s.sw[i]
		}
	}
	res.SSR = s.ss + s.pe
	res.DF = n - k
	res.ResidualSD = math.Sqrt(res.SSR / float64(res.DF))
	res.AtBound = make([]bool, p)
	for _, j := range s.free {
		lo, hi := bounds(s.opt, j)
		res.AtBound[j] = s.beta[j] <= lo || s.beta[j] >= hi
	}
	if res.Outcome != Converged && res.Outcome != Stalled || k == 0 {
		return res
	}
	cov := s.small[:k*k]
	if !s.covariance(res.ResidualSD, cov) {
		res.Outcome, res.Criterion = Singular, "the Jacobian at the solution is numerically rank-deficient: some parameter combination is not determined by the data"
		return res
	}
	res.Covariance = make([][]float64, p)
	cb := out[p+n:]
	res.StdErrors = cb[p*p:]
	for j := range res.Covariance {
		res.Covariance[j] = cb[j*p : j*p+p : j*p+p]
	}
	for a, ja := range s.free {
		for b, jb := range s.free {
			res.Covariance[ja][jb] = cov[a*k+b]
		}
		res.StdErrors[ja] = math.Sqrt(cov[a*k+a])
	}
	return res
}

// covariance sets cov to s²(JᵀWJ)⁻¹ (k×k row-major over the free
// parameters) from the Householder QR factor of √W·J with columns scaled
// to unit norm, and reports false when that factor is numerically
// singular. It works in s.big and s.z.
func (s *nllsState) covariance(sd float64, cov []float64) bool {
	n, k := len(s.x), len(s.free)
	a, sc := s.big[:n*k], s.z[:k]
	var riBuf [25]float64 // R⁻¹, on the stack for up to 5 free parameters
	var ri []float64
	if k*k <= len(riBuf) {
		ri = riBuf[:k*k]
	} else {
		ri = make([]float64, k*k)
	}
	for l := 0; l < k; l++ {
		var nn float64
		for _, v := range s.jac[l*n : l*n+n] {
			nn += v * v
		}
		if !(nn > 0) || math.Sqrt(nn)*math.Abs(s.beta[s.free[l]]) <= 1e-12*s.ynorm {
			return false
		}
		sc[l] = 1 / math.Sqrt(nn)
		for i, v := range s.jac[l*n : l*n+n] {
			a[l*n+i] = v * sc[l]
		}
	}
	householderQR(a, n, k, k)
	r := func(j, l int) float64 { return a[l*n+j] }
	maxd := 0.0
	for l := 0; l < k; l++ {
		maxd = max(maxd, math.Abs(r(l, l)))
	}
	for l := 0; l < k; l++ {
		if !(math.Abs(r(l, l)) > 1e-12*maxd) {
			return false
		}
	}
	// R⁻¹ by back substitution; (AᵀA)⁻¹ = R⁻¹R⁻ᵀ.
	for j := k - 1; j >= 0; j-- {
		ri[j*k+j] = 1 / r(j, j)
		for l := j + 1; l < k; l++ {
			var v float64
			for m := j + 1; m <= l; m++ {
				v += r(j, m) * ri[m*k+l]
			}
			ri[j*k+l] = -v / r(j, j)
		}
	}
	s2 := sd * sd
	for j := 0; j < k; j++ {
		for l := 0; l < k; l++ {
			var v float64
			for m := max(j, l); m < k; m++ {
				v += ri[j*k+m] * ri[l*k+m]
			}
			cov[j*k+l] = s2 * v * sc[j] * sc[l]
		}
	}
	for _, v := range cov {
		if !Finite(v) {
			return false
		}
	}
	return true
}
