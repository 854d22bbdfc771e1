package calib

import (
	"math"

	"gonum.org/v1/gonum/mat"
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
// by Householder QR (gonum mat.QR): one factorisation of √W·J·D⁻¹ per
// iteration, then one of the small [R; √λ·I] per trial λ, where r is the
// residual vector, J the analytic Jacobian over the free parameters and
// D = diag(dⱼ), dⱼ the largest ‖√W·Jⱼ‖ seen so far (so the damping is
// invariant to rescaling the parameters). λ starts at 1e-3 and follows
// Nielsen's rule (1999): after a step with gain ratio ρ > 0 (actual over
// predicted reduction) it is multiplied by max(1/3, 1 − (2ρ − 1)³), after a
// rejected step by 2, 4, 8, …. The covariance at the solution is
// s²(JᵀWJ)⁻¹, s² = SS/(n − p_free), from the QR factor of √W·J with
// unit-norm columns (never the normal equations).
//
// Preconditions (an *InputError otherwise): len(x) = len(y) = n, w nil
// (unit weights) or n positive finite weights, finite data, n greater than
// the number of free parameters, a finite model and Jacobian at Start.
// Every other ending is a typed Outcome, never an error: the caller reads
// Outcome before using the parameters.
func SolveNLLS(c Curve, x, y, w []float64, opt NLLSOptions) (NLLSResult, error) {
	p := c.NumParams()
	n := len(x)
	if err := checkNLLSInput(p, x, y, w, &opt); err != nil {
		return NLLSResult{}, err
	}
	free := make([]int, 0, p)
	for j := 0; j < p; j++ {
		if opt.Fixed == nil || !opt.Fixed[j] {
			free = append(free, j)
		}
	}
	if n <= len(free) {
		return NLLSResult{}, inputErr("points", "%d readings for %d free parameters", n, len(free))
	}
	s := newNLLSState(c, x, y, w, opt, free)
	if !s.evalJacobian() {
		return NLLSResult{}, inputErr("start", "the model or its Jacobian is not finite at the starting parameters")
	}
	res := s.iterate()
	return s.finish(res), nil
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
	for name, v := range map[string][]float64{"lower": opt.Lower, "upper": opt.Upper} {
		if v != nil && len(v) != p {
			return inputErr(name, "%d bounds for %d parameters", len(v), p)
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

// nllsState is the working state of one SolveNLLS call.
type nllsState struct {
	c       Curve
	x, y    []float64
	sw      []float64 // √wᵢ
	opt     NLLSOptions
	free    []int
	beta    []float64 // current parameters (all p)
	trial   []float64
	r       []float64 // √W·(y − f) at beta
	rt      []float64 // the same at trial
	jac     []float64 // √W·J over the free parameters, n×k row-major
	d       []float64 // Moré's column scales
	grad    []float64 // scratch of length p
	ss      float64
	ynorm   float64       // ‖√W·y‖
	big     *mat.Dense    // [√W·J·D⁻¹ | √W·r], n×(k+1), factorised once per iteration
	bigR    mat.Dense     // its R factor
	rk      []float64     // leading k×k block of R, row-major
	qtr     []float64     // first k entries of Qᵀ·√W·r
	small   *mat.Dense    // [R; √λ·I], 2k×k
	srhs    *mat.VecDense // [Qᵀ·√W·r; 0]
	z       *mat.VecDense
	qr, sqr mat.QR
	active  []bool // free parameter held at a bound this iteration
	atBound []bool
}

func newNLLSState(c Curve, x, y, w []float64, opt NLLSOptions, free []int) *nllsState {
	n, p, k := len(x), c.NumParams(), len(free)
	s := &nllsState{
		c: c, x: x, y: y, opt: opt, free: free,
		sw:      make([]float64, n),
		beta:    append([]float64(nil), opt.Start...),
		trial:   make([]float64, p),
		r:       make([]float64, n),
		rt:      make([]float64, n),
		jac:     make([]float64, n*k),
		d:       make([]float64, k),
		grad:    make([]float64, p),
		big:     mat.NewDense(n, k+1, nil),
		rk:      make([]float64, k*k),
		qtr:     make([]float64, k),
		small:   mat.NewDense(2*max(k, 1), max(k, 1), nil),
		srhs:    mat.NewVecDense(2*max(k, 1), nil),
		z:       mat.NewVecDense(max(k, 1), nil),
		active:  make([]bool, k),
		atBound: make([]bool, p),
	}
	for i := range s.sw {
		s.sw[i] = 1
		if w != nil {
			s.sw[i] = math.Sqrt(w[i])
		}
		s.ynorm = math.Hypot(s.ynorm, s.sw[i]*y[i])
	}
	return s
}

// residuals sets r = √W·(y − f(x; beta)) and returns Σr², or NaN when a
// value is not finite.
func (s *nllsState) residuals(beta, r []float64) float64 {
	var ss float64
	for i, xi := range s.x {
		ri := s.sw[i] * (s.y[i] - s.c.Eval(xi, beta, nil))
		r[i] = ri
		ss += ri * ri
	}
	if !Finite(ss) {
		return math.NaN()
	}
	return ss
}

// evalJacobian fills r, ss and the weighted Jacobian at beta and updates the
// column scales; it reports whether everything is finite.
func (s *nllsState) evalJacobian() bool {
	for i, xi := range s.x {
		f := s.c.Eval(xi, s.beta, s.grad)
		s.r[i] = s.sw[i] * (s.y[i] - f)
		for l, j := range s.free {
			s.jac[i*len(s.free)+l] = s.sw[i] * s.grad[j]
		}
	}
	s.ss = 0
	for _, v := range s.r {
		s.ss += v * v
	}
	if !Finite(s.ss) {
		return false
	}
	for l := range s.free {
		var nn float64
		for i := range s.x {
			v := s.jac[i*len(s.free)+l]
			nn += v * v
		}
		if !Finite(nn) {
			return false
		}
		s.d[l] = max(s.d[l], math.Sqrt(nn))
	}
	return true
}

// iterate runs the Levenberg–Marquardt loop and returns how it ended.
func (s *nllsState) iterate() NLLSResult {
	n, k := len(s.x), len(s.free)
	opt := s.opt
	lambda, nu := 1e-3, 2.0
	g := make([]float64, k)     // Jᵀ·W·r over the free parameters
	delta := make([]float64, k) // trial step
	var res NLLSResult
	for it := 1; ; it++ {
		res.Iterations = it
		if s.ss <= 1e-300 {
			res.Outcome, res.Criterion = Converged, "zero residual"
			return res
		}
		// Gradient and the active set.
		gmax := 0.0
		for l, j := range s.free {
			var gl, cn float64
			for i := 0; i < n; i++ {
				a := s.jac[i*k+l]
				gl += a * s.r[i]
				cn += a * a
			}
			g[l] = gl
			lo, hi := bounds(opt, j)
			s.active[l] = (s.beta[j] <= lo && gl < 0) || (s.beta[j] >= hi && gl > 0)
			if !s.active[l] && cn > 0 {
				gmax = max(gmax, math.Abs(gl)/math.Sqrt(cn*s.ss))
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
				ssNew = s.residuals(s.trial, s.rt)
			}
			if !math.IsNaN(ssNew) {
				act = s.ss - ssNew
				if pred > 0 {
					ratio = act / pred
				}
				if math.Abs(act) <= opt.FTol*s.ss && pred <= opt.FTol*s.ss && ratio <= 2 {
					if act > 0 {
						s.accept()
					}
					res.Outcome, res.Criterion = Converged, "relative reduction in SS"
					return res
				}
			}
			if ratio > 0 {
				sn, bn := s.scaledNorms(delta)
				s.accept()
				lambda *= max(1.0/3, 1-math.Pow(2*ratio-1, 3))
				lambda = max(lambda, 1e-300)
				nu = 2
				if sn <= opt.XTol*bn {
					if !s.evalJacobian() {
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
		if !s.evalJacobian() {
			res.Outcome, res.Criterion = Stalled, "the Jacobian is not finite at the accepted parameters"
			return res
		}
	}
}

// nllsEps is the float64 machine epsilon.
const nllsEps = 0x1p-52

// factor computes, once per iteration, the Householder QR factorisation
// of [√W·J·D⁻¹ | √W·r] (columns of held parameters zeroed): its leading
// k×k block R and the first k entries of Qᵀ·√W·r reduce every trial step
// of the iteration to a 2k×k problem (as in Moré's lmpar).
func (s *nllsState) factor() {
	n, k := len(s.x), len(s.free)
	raw := s.big.RawMatrix()
	for i := 0; i < n; i++ {
		row := raw.Data[i*raw.Stride : i*raw.Stride+k+1]
		for l := 0; l < k; l++ {
			v := 0.0
			if !s.active[l] {
				v = s.jac[i*k+l] / s.scale(l)
			}
			row[l] = v
		}
		row[k] = s.r[i]
	}
	s.qr.Factorize(s.big)
	s.qr.RTo(&s.bigR)
	for j := 0; j < k; j++ {
		for l := 0; l < k; l++ {
			s.rk[j*k+l] = s.bigR.At(j, l)
		}
		s.qtr[j] = s.bigR.At(j, k)
	}
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
// min ‖[R; √λ·I]·z − [Qᵀ·√W·r; 0]‖ (by QR, mat.QR), into delta = D⁻¹z (in
// parameter units, zero for held parameters) and sets s.trial to β + δ
// projected onto the box. It reports whether the solve gave finite values.
func (s *nllsState) step(lambda float64, delta []float64) bool {
	k := len(s.free)
	sl := math.Sqrt(lambda)
	raw := s.small.RawMatrix()
	for j := 0; j < 2*k; j++ {
		row := raw.Data[j*raw.Stride : j*raw.Stride+k]
		clear(row)
		if j < k {
			copy(row, s.rk[j*k:j*k+k])
			s.srhs.SetVec(j, s.qtr[j])
			continue
		}
		s.srhs.SetVec(j, 0)
		row[j-k] = sl
		if s.active[j-k] {
			row[j-k] = 1
		}
	}
	s.sqr.Factorize(s.small)
	_ = s.sqr.SolveVecTo(s.z, false, s.srhs) // a Condition error still leaves a usable z; non-finite z is caught below
	copy(s.trial, s.beta)
	for l, j := range s.free {
		v := s.z.AtVec(l) / s.scale(l)
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
// the (projected) step δ: ‖r‖² − ‖r − J·δ‖² = Σ (J·δ)ᵢ(2rᵢ − (J·δ)ᵢ),
// summed in that form so that it does not cancel against ‖r‖².
func (s *nllsState) predicted(delta []float64) float64 {
	var pred float64
	k := len(s.free)
	for i := range s.x {
		var v float64
		for l, jl := range s.jac[i*k : i*k+k] {
			v += jl * delta[l]
		}
		pred += v * (2*s.r[i] - v)
	}
	return pred
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

// accept makes the trial parameters current.
func (s *nllsState) accept() {
	copy(s.beta, s.trial)
	copy(s.r, s.rt)
	s.ss = 0
	for _, v := range s.r {
		s.ss += v * v
	}
}

// finish fills the result at the final parameters: SS, s, df, residuals,
// bounds and (when the Jacobian has full rank) the covariance.
func (s *nllsState) finish(res NLLSResult) NLLSResult {
	n, p, k := len(s.x), len(s.beta), len(s.free)
	// The Jacobian matches beta unless the last accepted step ended the loop
	// by the SS criterion; re-evaluating is cheap and always consistent.
	if !s.evalJacobian() {
		res.Outcome, res.Criterion = Stalled, "the Jacobian is not finite at the final parameters"
	}
	res.Params = append([]float64(nil), s.beta...)
	res.Residuals = make([]float64, n)
	for i := range s.x {
		res.Residuals[i] = s.r[i] / s.sw[i]
	}
	res.SSR = s.ss
	res.DF = n - k
	res.ResidualSD = math.Sqrt(s.ss / float64(res.DF))
	res.AtBound = make([]bool, p)
	for _, j := range s.free {
		lo, hi := bounds(s.opt, j)
		res.AtBound[j] = s.beta[j] <= lo || s.beta[j] >= hi
	}
	if res.Outcome != Converged && res.Outcome != Stalled || k == 0 {
		return res
	}
	cov, ok := s.covariance(res.ResidualSD)
	if !ok {
		res.Outcome, res.Criterion = Singular, "the Jacobian at the solution is numerically rank-deficient: some parameter combination is not determined by the data"
		return res
	}
	res.Covariance = make([][]float64, p)
	res.StdErrors = make([]float64, p)
	for j := range res.Covariance {
		res.Covariance[j] = make([]float64, p)
	}
	for a, ja := range s.free {
		for b, jb := range s.free {
			res.Covariance[ja][jb] = cov[a*k+b]
		}
		res.StdErrors[ja] = math.Sqrt(cov[a*k+a])
	}
	return res
}

// covariance returns s²(JᵀWJ)⁻¹ (k×k row-major over the free parameters)
// from the QR factor of √W·J with columns scaled to unit norm, and false
// when that factor is numerically singular.
func (s *nllsState) covariance(sd float64) ([]float64, bool) {
	n, k := len(s.x), len(s.free)
	a := mat.NewDense(n, k, nil)
	sc := make([]float64, k)
	for l := 0; l < k; l++ {
		var nn float64
		for i := 0; i < n; i++ {
			v := s.jac[i*k+l]
			nn += v * v
		}
		if !(nn > 0) || math.Sqrt(nn)*math.Abs(s.beta[s.free[l]]) <= 1e-12*s.ynorm {
			return nil, false
		}
		sc[l] = 1 / math.Sqrt(nn)
		for i := 0; i < n; i++ {
			a.Set(i, l, s.jac[i*k+l]*sc[l])
		}
	}
	var qr mat.QR
	qr.Factorize(a)
	var r mat.Dense
	qr.RTo(&r)
	maxd := 0.0
	for l := 0; l < k; l++ {
		maxd = max(maxd, math.Abs(r.At(l, l)))
	}
	for l := 0; l < k; l++ {
		if !(math.Abs(r.At(l, l)) > 1e-12*maxd) {
			return nil, false
		}
	}
	// R⁻¹ by back substitution; (AᵀA)⁻¹ = R⁻¹R⁻ᵀ.
	ri := make([]float64, k*k)
	for j := k - 1; j >= 0; j-- {
		ri[j*k+j] = 1 / r.At(j, j)
		for l := j + 1; l < k; l++ {
			var v float64
			for m := j + 1; m <= l; m++ {
				v += r.At(j, m) * ri[m*k+l]
			}
			ri[j*k+l] = -v / r.At(j, j)
		}
	}
	cov := make([]float64, k*k)
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
			return nil, false
		}
	}
	return cov, true
}
