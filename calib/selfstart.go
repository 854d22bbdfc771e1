package calib

import (
	"math"
	"slices"
)

// selfStart returns starting values computed from the data, honouring the
// fixed coefficients of opt (a fixed value is used in place of its
// estimate), clipped into [lower, upper]:
//
//   - 4PL: a and d from the responses at the lowest and highest
//     concentration, moved 5 % of the response spread beyond the extreme
//     responses; then b and c from the straight line ln(1/u − 1) =
//     b·ln x − b·ln c, u = (y − d)/(a − d) (the logit linearisation, over
//     x > 0). Should the line fail (b ≤ 0), b = 1 and c the geometric mean
//     of the positive concentrations.
//     Given b and c the 4PL is linear in a and d, y = a·h + d·(1 − h) with
//     h = 1/(1 + (x/c)^b). When all four are free, b and c are then
//     refined over that linear profile by variable projection, a and d
//     taking their weighted least-squares values at each step
//     (refineLogistic; it saves the solver several iterations). When b or
//     c is fixed and a and d are free, a and d alone are replaced by their
//     weighted least-squares values if those are finite and keep the
//     curve's direction (refineAsymptotes).
//   - 5PL: the fitted 4PL (same data, weights and fixed a, b, c, d), g = 1.
//   - power: the straight line ln|y| = ln|a| + b·ln x over readings with
//     x > 0 and y of the majority sign.
//   - exponential: y0 the mean response at the lowest concentration (offset
//     model), a 10 % beyond the response at the highest concentration, b
//     from −ln(1 − u) = b·x through the origin, u = (y − y0)/a.
//
// lx[i] = ln x[i] (−Inf at 0).
//
// rep groups the readings by concentration (see replicates); the 4PL's
// refinement works on its levels when it has any.
//
// Its working memory comes from sc; the start it returns does not.
func selfStart(m Model, x, lx, y, w []float64, opt CurveOptions, lower, upper []float64, rep *replicates, sc *scratch) ([]float64, error) {
	fixed := func(j int) (float64, bool) {
		if opt.Fixed != nil && !math.IsNaN(opt.Fixed[j]) {
			return opt.Fixed[j], true
		}
		return 0, false
	}
	ends := levelEnds(x, y)
	var s []float64
	switch m {
	case FourPL:
		// Replicates enter the start as their levels: the weighted
		// least-squares problems below are the same on the levels (see
		// replicates), and the logit line is fitted to the level means.
		gx, glx, gy, gw, pe := x, lx, y, w, 0.0
		if rep.x != nil {
			gx, glx, gy, gw, pe = rep.x, rep.lx, rep.y, rep.w, rep.pe
		}
		s = startLogistic(gx, glx, gy, ends, fixed, sc.f.take(3*len(gx)))
		if opt.Fixed == nil || !slices.ContainsFunc(opt.Fixed[:4], func(v float64) bool { return !math.IsNaN(v) }) {
			refineLogistic(gx, glx, gy, gw, s, pe, sc.f.take(2*len(gx)))
		} else {
			refineAsymptotes(gx, glx, gy, gw, s, fixed, sc.f.take(2*len(gx)))
		}
	case FivePL:
		o := opt
		o.Model, o.Start, o.MaxIter = FourPL, nil, 0
		if opt.Start != nil {
			o.Start = opt.Start[:4]
		}
		if opt.Fixed != nil {
			o.Fixed = opt.Fixed[:4]
		}
		f, err := FitCurve(x, y, w, o)
		if err != nil {
			return nil, err
		}
		s = append(slices.Clone(f.Coefficients), 1)
	case Power:
		s = startPower(x, y)
	case ExpSaturation, ExpSaturationOffset:
		s = startExp(x, y, ends, m == ExpSaturationOffset, fixed)
	}
	for j := range s {
		if v, ok := fixed(j); ok {
			s[j] = v
		}
		if !Finite(s[j]) {
			s[j] = 1
		}
		s[j] = min(max(s[j], lower[j]), upper[j])
	}
	return s, nil
}

// levelEnds returns the mean response at the lowest and at the highest
// concentration, and the smallest and largest response.
func levelEnds(x, y []float64) (e [4]float64) {
	lo, hi := slices.Min(x), slices.Max(x)
	var nl, nh float64
	for i := range x {
		if x[i] == lo {
			e[0] += y[i]
			nl++
		}
		if x[i] == hi {
			e[1] += y[i]
			nh++
		}
	}
	e[0] /= nl
	e[1] /= nh
	e[2], e[3] = slices.Min(y), slices.Max(y)
	return e
}

// lineFit returns the unweighted least-squares line v = b0 + b1·u and
// whether it is defined (two distinct u at least).
func lineFit(u, v []float64) (b0, b1 float64, ok bool) {
	n := float64(len(u))
	if n < 2 {
		return 0, 0, false
	}
	var mu, mv float64
	for i := range u {
		mu += u[i]
		mv += v[i]
	}
	mu /= n
	mv /= n
	var suu, suv float64
	for i := range u {
		suu += (u[i] - mu) * (u[i] - mu)
		suv += (u[i] - mu) * (v[i] - mv)
	}
	if !(suu > 0) {
		return 0, 0, false
	}
	b1 = suv / suu
	return mv - b1*mu, b1, Finite(b1, mv-b1*mu)
}

// buf is 3·len(x) of scratch memory.
func startLogistic(x, lnx, y []float64, e [4]float64, fixed func(int) (float64, bool), buf []float64) []float64 {
	spread := e[3] - e[2]
	a, d := e[3]+0.05*spread, e[2]-0.05*spread // falling curve
	if e[1] > e[0] {
		a, d = e[2]-0.05*spread, e[3]+0.05*spread
	}
	if v, ok := fixed(0); ok {
		a = v
	}
	if v, ok := fixed(3); ok {
		d = v
	}
	all, lx, z := buf[0:0:len(x)], buf[len(x):len(x):2*len(x)], buf[2*len(x):2*len(x):3*len(x)]
	for i := range x {
		if x[i] > 0 {
			l := lnx[i]
			all = append(all, l)
			if a == d {
				continue
			}
			u := min(max((y[i]-d)/(a-d), 0.01), 0.99)
			lx = append(lx, l)
			z = append(z, math.Log(1/u-1))
		}
	}
	b0, b1, ok := lineFit(lx, z)
	b, c := b1, math.Exp(-b0/b1)
	if !ok || !(b1 > 0) || !Finite(c) {
		var m float64
		for _, v := range all {
			m += v
		}
		b, c = 1, math.Exp(m/float64(len(all)))
	}
	return []float64{a, b, c, d}
}

func startPower(x, y []float64) []float64 {
	sign := 0.0
	for i := range y {
		if x[i] > 0 {
			sign += math.Copysign(1, y[i])
		}
	}
	sign = math.Copysign(1, sign)
	var lx, ly []float64
	for i := range x {
		if x[i] > 0 && y[i]*sign > 0 {
			lx = append(lx, math.Log(x[i]))
			ly = append(ly, math.Log(y[i]*sign))
		}
	}
	b0, b1, ok := lineFit(lx, ly)
	if !ok || !(b1 > 0) {
		// y = a·x through the origin.
		var sxy, sxx float64
		for i := range x {
			sxy += x[i] * y[i]
			sxx += x[i] * x[i]
		}
		return []float64{sxy / sxx, 1}
	}
	return []float64{sign * math.Exp(b0), b1}
}

func startExp(x, y []float64, e [4]float64, offset bool, fixed func(int) (float64, bool)) []float64 {
	var y0 float64
	if offset {
		y0 = e[0]
		if v, ok := fixed(2); ok {
			y0 = v
		}
	}
	a := 1.1 * (e[1] - y0)
	if v, ok := fixed(0); ok {
		a = v
	}
	var sxz, sxx float64
	for i := range x {
		if a == 0 {
			break
		}
		u := min(max((y[i]-y0)/a, 0), 0.99)
		sxz += x[i] * -math.Log1p(-u)
		sxx += x[i] * x[i]
	}
	b := sxz / sxx
	if !(b > 0) || !Finite(b) {
		b = 1 / slices.Max(x)
	}
	if offset {
		return []float64{a, b, y0}
	}
	return []float64{a, b}
}

// refineAsymptotes replaces a and d of the 4PL start s by the weighted
// least-squares solution of y = a·h + d·(1 − h), h = 1/(1 + (x/c)^b) at
// the start's b and c (the profile's asymptotes, logisticProfile.at), when
// neither is fixed and the solution is finite and keeps the sign of
// a − d. w must not be nil; scratch is 2·len(x) of memory.
func refineAsymptotes(x, lx, y, w, s []float64, fixed func(int) (float64, bool), scratch []float64) {
	if _, ok := fixed(0); ok {
		return
	}
	if _, ok := fixed(3); ok {
		return
	}
	n := len(x)
	p := logisticProfile{x: x, lx: lx, y: y, w: w, h: scratch[:n:n], u: scratch[n : 2*n : 2*n]}
	a, d, _, _, ok := p.at(s[1], math.Log(s[2]))
	if ok && (a-d)*(s[0]-s[3]) > 0 {
		s[0], s[3] = a, d
	}
}

// logisticProfile is the 4PL with b and c given and a and d eliminated:
// at (b, ln c) the responses are linear in the asymptotes,
// y = a·h + d·(1 − h), h = 1/(1 + (x/c)^b), and a and d are their weighted
// least-squares values.
type logisticProfile struct {
	x, lx, y, w []float64
	h, u        []float64 // h and ln(x/c) per reading at the last evaluation
}

// at evaluates the profile at (b, lc = ln c): the asymptotes, the weighted
// sum of squares and the Gram sums of the basis (h, 1 − h); ok is false
// when the basis is degenerate or a value is not finite.
// w must not be nil.
func (p *logisticProfile) at(b, lc float64) (a, d, ss float64, gram [3]float64, ok bool) {
	var shh, sho, soo, shy, soy float64
	n := len(p.x)
	x, lx, y, w, hs, us := p.x[:n], p.lx[:n], p.y[:n], p.w[:n], p.h[:n], p.u[:n]
	h, u, px := 1.0, 0.0, math.NaN()
	for i, xi := range x {
		if xi != px {
			px, h, u = xi, 1.0, 0.0
			if xi > 0 {
				u = lx[i] - lc
				// core4(b·u) written out (the start's inner loop).
				t := b * u
				e := math.Exp(-math.Abs(t))
				h = 1 / (1 + e)
				if t > 0 {
					h *= e
				}
			}
		}
		hs[i], us[i] = h, u
		wi := w[i]
		o := 1 - h
		shh += wi * h * h
		sho += wi * h * o
		soo += wi * o * o
		shy += wi * h * y[i]
		soy += wi * o * y[i]
	}
	det := shh*soo - sho*sho
	if !(det > 1e-12*shh*soo) {
		return 0, 0, 0, gram, false
	}
	a = (shy*soo - soy*sho) / det
	d = (soy*shh - shy*sho) / det
	for i, yi := range y {
		r := yi - d - (a-d)*hs[i]
		ss += w[i] * r * r
	}
	return a, d, ss, [3]float64{shh, sho, soo}, Finite(a, d, ss)
}

// refineLogistic improves a 4PL start whose four coefficients are all
// free by damped Gauss–Newton steps on (b, ln c) over the profile with a
// and d eliminated (variable projection, Golub and Pereyra 1973, with
// Kaufman's 1975 approximation of its Jacobian): each step projects the
// model's derivatives in b and ln c off the span of (h, 1 − h) and solves
// the 2×2 damped normal equations; once a step has lowered the sum by
// less than 1 % (near the minimum), the residuals' curvature Σw·r·∂²f is
// taken off the matrix where that leaves it positive definite (Newton's
// step, which converges quadratically where Gauss–Newton converges
// linearly on a curve with non-zero residuals). A step is taken only when
// it lowers the weighted sum of squares. At most 10 steps, ending when a
// trial step cannot lower the sum beyond rounding (1e-14 of it) or after
// a step that lowers it by less than 1e-12 of the whole sum (the solver's own
// relative-reduction tolerance, FTol's default; pe is the pure-error sum
// of squares of readings grouped into levels, which the levels' sum
// leaves out). The solver, not this, decides convergence: this only
// brings the start near the minimum, where Levenberg–Marquardt on all
// four coefficients usually confirms it in one iteration (the profile's
// steps are cheaper than the solver's: two unknowns and no
// factorisation). w must not be nil. It leaves s as it is when the
// profile cannot be evaluated at the start.
func refineLogistic(x, lx, y, w, s []float64, pe float64, scratch []float64) {
	n := len(x)
	p := logisticProfile{x: x, lx: lx, y: y, w: w, h: scratch[:n:n], u: scratch[n : 2*n : 2*n]}
	b, lc := s[1], math.Log(s[2])
	a, d, ss, gram, ok := p.at(b, lc)
	if !ok || (a-d)*(s[0]-s[3]) <= 0 {
		return
	}
	mu := 1e-3
	local := false // the last step lowered SS by less than 1 %
	for it := 0; it < 10 && ss > 0; it++ {
		// Derivatives of the model in b and ln c: with k = h·(1 − h),
		// ∂f/∂b = −(a − d)·k·u and ∂f/∂ln c = (a − d)·k·b.
		var vbb, vbl, vll, hb, hl, ob, ol, gb, gl, sbb, sbl, sll float64
		m := a - d
		for i, h := range p.h {
			wi := w[i]
			u := p.u[i]
			k := m * h * (1 - h)
			jb, jl := -k*u, k*b
			r := y[i] - d - m*h
			vbb += wi * jb * jb
			vbl += wi * jb * jl
			vll += wi * jl * jl
			hb += wi * h * jb
			hl += wi * h * jl
			ob += wi * (1 - h) * jb
			ol += wi * (1 - h) * jl
			gb += wi * jb * r
			gl += wi * jl * r
			// The residuals' curvature, Σw·r·∂²f.
			fbb, fbl, fll := logisticCurvature(k, h, u, b)
			sbb += wi * r * fbb
			sbl += wi * r * fbl
			sll += wi * r * fll
		}
		// Project off the basis: A = V − Pᵀ·G⁻¹·P.
		shh, sho, soo := gram[0], gram[1], gram[2]
		det := shh*soo - sho*sho
		proj := func(p1, p2, q1, q2 float64) float64 {
			return (p1*(soo*q1-sho*q2) + p2*(shh*q2-sho*q1)) / det
		}
		abb := vbb - proj(hb, ob, hb, ob)
		abl := vbl - proj(hb, ob, hl, ol)
		all := vll - proj(hl, ol, hl, ol)
		// Newton's matrix, A − S, where it is positive definite (near the
		// minimum): it converges quadratically where Gauss–Newton's A
		// alone converges linearly on a curve with non-zero residuals.
		if nbb, nbl, nll := abb-sbb, abl-sbl, all-sll; local && nbb > 0 && nll > 0 && nbb*nll > nbl*nbl {
			abb, abl, all = nbb, nbl, nll
		}
		improved := false
		for try := 0; try < 6; try++ {
			m11, m22 := abb*(1+mu), all*(1+mu)
			dd := m11*m22 - abl*abl
			if !(dd > 0) {
				mu *= 10
				continue
			}
			db := (gb*m22 - gl*abl) / dd
			dl := (gl*m11 - gb*abl) / dd
			nb, nlc := b+db, lc+dl
			if !(nb > 0) || !Finite(nb, nlc) {
				mu *= 10
				continue
			}
			na, nd, nss, ng, ok := p.at(nb, nlc)
			if ok && nss >= ss && nss-ss <= 1e-14*(ss+pe) {
				break // no lower sum within rounding: the minimum
			}
			if ok && nss < ss && (na-nd)*(s[0]-s[3]) > 0 {
				improved = ss-nss > 1e-12*(ss+pe)
				local = ss-nss < 1e-2*(ss+pe)
				b, lc, a, d, ss, gram = nb, nlc, na, nd, nss, ng
				mu = max(mu/10, 1e-9)
				break
			}
			mu *= 10
		}
		if !improved {
			break
		}
	}
	s[0], s[1], s[2], s[3] = a, b, math.Exp(lc), d
}

// logisticCurvature returns the 4PL's second derivatives in b and ln c at
// a reading with h = 1/(1 + (x/c)^b), u = ln(x/c) and k = (a − d)·h·(1 − h):
// ∂²f/∂b² = k·(1 − 2h)·u², ∂²f/∂b∂ln c = k·(1 − b·u·(1 − 2h)) and
// ∂²f/∂(ln c)² = k·(1 − 2h)·b².
func logisticCurvature(k, h, u, b float64) (fbb, fbl, fll float64) {
	q := 1 - 2*h
	return k * q * u * u, k * (1 - b*u*q), k * q * b * b
}
