package calib

import "math"

// mandatoryNote ends the Detail of a mandatory check that could not be
// computed.
const mandatoryNote = " This check is mandatory under the policy, so not computing it fails the verdict."

// checkSource names the standard or practice behind each check.
func checkSource(name string, m Model) string {
	switch name {
	case CheckMinLevels:
		return "ICH M10 (2022): at least 6 non-zero calibration levels; US EPA SW-846 Method 8000D: at least 5 for a line, 6 for a quadratic"
	case CheckMandel:
		if m == Quadratic {
			return "ISO 8466-2 / ISO 8466-1: Mandel's fitting test (the quadratic term must improve the fit significantly)"
		}
		return "ISO 8466-1: Mandel's fitting test (line against quadratic)"
	case CheckLackOfFit:
		return "Lack-of-fit F-test with pure error from replicates (Montgomery, Design and Analysis of Experiments)"
	case CheckHomoscedasticity:
		return "ISO 8466-1: variance homogeneity test, lowest against highest standard"
	case CheckBackCalculation:
		return "ICH M10 (2022): back-calculated standards within ±15 % of nominal (±20 % at the LLOQ); at least 75 % of standards passing"
	case CheckRSquared:
		return "US EPA SW-846 Method 8000D: r ≥ 0.995 (r² ≥ 0.99)"
	case CheckRSE:
		return "US EPA SW-846 Method 8000D: relative standard error RSE = 100·√{Σ[(x'−x)/x]²/(n−p)} ≤ 20 %"
	case CheckIntercept:
		if m == LinearOrigin {
			return "Student t-test of the intercept of the unconstrained line (whether the origin model is justified; Raposo, TrAC 77 (2016) 167)"
		}
		return "Student t-test of the intercept against zero (e.g. Miller & Miller, Statistics and Chemometrics for Analytical Chemistry, ch. 5)"
	case CheckResidualRuns:
		return "Wald–Wolfowitz runs test on the signs of the residuals in concentration order (exact distribution, one-sided: few runs indicate curvature)"
	case CheckOutliers:
		return "Common practice: |internally studentised residual| > 3 is an outlier, Cook's distance > 1 is influential"
	}
	return ""
}

// computeChecks evaluates every check of the policy on the fit f of the
// dataset d with normalised weights w, appending them to checks. The Detail
// texts the checks compute are written to dt's text and set by dt.done.
func computeChecks(r *Report, d *dataset, des *design, f lsq, w []float64, pol Policy, checks []Check, dt *details) []Check {
	var nzBuf [64]float64
	nz := nzBuf[:0]
	if len(d.levels) > len(nzBuf) {
		nz = make([]float64, 0, len(d.levels))
	}
	for _, lv := range d.levels {
		nz = append(nz, lv.x)
	}
	t := dt.t
	first := len(checks)
	// ends[i] is where the Detail text of check first+i ends in t (a check
	// that is not computed writes none: its Detail is set directly).
	var ends [len(checkNames)]int
	start := len(t.b)
	checks = append(checks, minLevelsCheck(nz, pol, t))
	ends[0] = len(t.b)
	checks = append(checks, mandelCheck(r, d, des, f, pol, t))
	ends[1] = len(t.b)
	checks = append(checks, lackOfFitCheck(d, f, w, pol, t))
	ends[2] = len(t.b)
	checks = append(checks, homoscedasticityCheck(r, d, pol, t))
	ends[3] = len(t.b)
	checks = append(checks, backCalcCheck(r, d, pol, t))
	ends[4] = len(t.b)
	checks = append(checks, rSquaredCheck(r, pol, t))
	ends[5] = len(t.b)
	checks = append(checks, rseCheck(r, d, pol, t))
	ends[6] = len(t.b)
	checks = append(checks, interceptCheck(r, des, f, pol, t))
	ends[7] = len(t.b)
	checks = append(checks, runsCheck(r, d, f, pol, t))
	ends[8] = len(t.b)
	checks = append(checks, outlierCheck(r, d, pol, t))
	ends[9] = len(t.b)
	for k := range ends {
		c := &checks[first+k]
		c.Source = checkSource(c.Name, r.Model)
		c.Mandatory = pol.mandatory(c.Name)
		if ends[k] > start {
			if c.Computed {
				dt.keep(&c.Detail, start, ends[k])
			} else {
				c.Detail = string(t.b[start:ends[k]])
			}
		}
		if !c.Computed {
			c.Passed = false
			if c.Mandatory {
				c.Detail += mandatoryNote
			}
		}
		start = ends[k]
	}
	return checks
}

// notComputed returns a check that could not be computed, with the reason.
func notComputed(name, why string) Check {
	return Check{Name: name, Detail: "Not computed: " + why + "."}
}

// minLevelsCheck: the number of distinct non-zero concentrations in the fit
// must reach Policy.MinLevels (zero-concentration standards are not counted,
// as ICH M10 does not count blank and zero sample).
func minLevelsCheck(xs []float64, pol Policy, t *text) Check {
	k := 0
	for _, x := range xs {
		if x != 0 {
			k++
		}
	}
	c := Check{Name: CheckMinLevels, Statistic: float64(k), Limit: float64(pol.MinLevels), Computed: true,
		Passed: k >= pol.MinLevels, Source: checkSource(CheckMinLevels, "")}
	t.i(k).s(" non-zero concentration level(s) in the fit; at least ").i(pol.MinLevels).
		s(" are required. Zero-concentration standards (blank, zero sample) are not counted.")
	return c
}

// mandelCheck: DS² = (N−2)s1² − (N−3)s2² from the line (s1) and the
// quadratic (s2) with the same weights; PG = DS²/s2² against
// F(1−α; 1, N−3) (ISO 8466-1). For linear models PG ≤ F passes (the line is
// adequate); for the quadratic PG > F passes (the quadratic term is
// justified, ISO 8466-2). The origin model is judged by the curvature of the
// unconstrained line. Needs N ≥ 4 readings at three or more levels.
func mandelCheck(r *Report, d *dataset, des *design, f lsq, pol Policy, t *text) Check {
	n := len(d.x)
	if n < 4 || len(d.levels) < 3 {
		return notComputed(CheckMandel, "Mandel's test needs at least 4 readings at 3 or more concentrations")
	}
	if des.k < 3 {
		return notComputed(CheckMandel, "the quadratic term x² is outside the numerically usable range")
	}
	lineSSR, quadSSR := f.ssr, f.ssr
	var err error
	if r.Model != Linear {
		if lineSSR, err = des.fitSSR(Linear); err != nil {
			return notComputed(CheckMandel, "the line could not be fitted: "+err.Error())
		}
	}
	if r.Model != Quadratic {
		if quadSSR, err = des.fitSSR(Quadratic); err != nil {
			return notComputed(CheckMandel, "the quadratic could not be fitted: "+err.Error())
		}
	}
	ds2 := max(lineSSR-quadSSR, 0) // (N−2)s1² − (N−3)s2²
	s22 := quadSSR / float64(n-3)
	if !(s22 > 0) {
		return notComputed(CheckMandel, "the quadratic fits the readings exactly, so the test statistic is undefined")
	}
	pg := ds2 / s22
	fc := fQuantile(1-pol.MandelAlpha, 1, n-3)
	c := Check{Name: CheckMandel, Statistic: pg, Limit: fc, Computed: true}
	better := pg > fc
	t.s("PG = ").g(pg)
	if better {
		t.s(" > ")
	} else {
		t.s(" ≤ ")
	}
	t.s("F(").gc(1 - pol.MandelAlpha).s("; 1, ").i(n - 3).s(") = ").gc(fc)
	switch {
	case r.Model == Quadratic && better:
		t.s(": the quadratic fits significantly better than a line, so the quadratic model is justified.")
	case r.Model == Quadratic:
		t.s(": the quadratic does not fit significantly better than a line; a linear model should be used.")
	case better:
		t.s(": a quadratic fits significantly better, so the response is not linear over this range; consider a narrower range or the quadratic model.")
	default:
		t.s(": a quadratic does not fit significantly better; the response is linear over this range.")
	}
	if r.Model == LinearOrigin {
		t.s(" (Tested on the line with intercept, which shows the curvature of the readings.)")
	}
	c.Passed = better == (r.Model == Quadratic)
	return c
}

// lackOfFitCheck: SSpe = ΣΣw(y − ȳ_level,w)², df n−k; SSlof = SSres − SSpe,
// df k−p; F = [SSlof/(k−p)]/[SSpe/(n−k)] against F(1−α; k−p, n−k)
// (Montgomery). Needs replicates (n > k) and k > p levels; never passes by
// default.
func lackOfFitCheck(d *dataset, f lsq, w []float64, pol Policy, t *text) Check {
	n, k, p := len(d.x), len(d.levels), f.p
	if n-k < 1 {
		return notComputed(CheckLackOfFit, "no level has replicate readings, so there is no pure error to test against")
	}
	if k-p < 1 {
		return notComputed(CheckLackOfFit, "there are no more levels than coefficients ("+itoa(k)+" levels, "+itoa(p)+" coefficients)")
	}
	var sspe float64
	for _, lv := range d.levels {
		var sw, swy float64
		for _, i := range lv.idx {
			sw += w[i]
			swy += w[i] * d.y[i]
		}
		m := swy / sw
		for _, i := range lv.idx {
			sspe += w[i] * (d.y[i] - m) * (d.y[i] - m)
		}
	}
	if !(sspe > 0) {
		return notComputed(CheckLackOfFit, "the replicates are identical (pure error 0), so the F ratio is undefined")
	}
	sslof := max(f.ssr-sspe, 0)
	fs := (sslof / float64(k-p)) / (sspe / float64(n-k))
	fc := fQuantile(1-pol.LackOfFitAlpha, k-p, n-k)
	c := Check{Name: CheckLackOfFit, Statistic: fs, Limit: fc, Computed: true, Passed: fs <= fc}
	t.s("F = ").g(fs)
	if c.Passed {
		t.s(" ≤ ")
	} else {
		t.s(" > ")
	}
	t.s("F(").gc(1 - pol.LackOfFitAlpha).s("; ").i(k - p).s(", ").i(n - k).s(") = ").gc(fc)
	if c.Passed {
		t.s(": the scatter of the level means about the curve is consistent with the scatter of the replicates.")
	} else {
		t.s(": the level means deviate from the curve more than the replicates scatter; the model does not describe the data.")
	}
	return c
}

// homoscedasticityCheck: PG = larger/smaller of s² at the lowest and the
// highest level against F(1−α; n_larger−1, n_smaller−1) (ISO 8466-1). Needs
// two or more readings at both ends and a non-zero smaller variance.
func homoscedasticityCheck(r *Report, d *dataset, pol Policy, t *text) Check {
	lo, hi := d.levels[0], d.levels[len(d.levels)-1]
	if lo.count < 2 || hi.count < 2 {
		return notComputed(CheckHomoscedasticity, "the lowest and the highest level both need two or more readings")
	}
	v1, v2 := lo.sd*lo.sd, hi.sd*hi.sd
	big, small, dn, dd := v2, v1, hi.count-1, lo.count-1
	if v1 > v2 {
		big, small, dn, dd = v1, v2, lo.count-1, hi.count-1
	}
	if !(small > 0) {
		return notComputed(CheckHomoscedasticity, "the replicates at one end are identical (variance 0), so the variance ratio is undefined")
	}
	pg := big / small
	fc := fQuantile(1-pol.HomoscedasticityAlpha, dn, dd)
	c := Check{Name: CheckHomoscedasticity, Statistic: pg, Limit: fc, Computed: true, Passed: pg <= fc}
	t.s("Variance ratio ").g(pg)
	if c.Passed {
		t.s(" ≤ ")
	} else {
		t.s(" > ")
	}
	t.s("F(").gc(1 - pol.HomoscedasticityAlpha).s("; ").i(dn).s(", ").i(dd).s(") = ").gc(fc)
	switch {
	case c.Passed:
		t.s(": the response variance at the lowest and highest standard does not differ significantly.")
	case r.Weighting == WeightNone:
		t.s(": the response variance differs between the ends of the range (heteroscedastic); a weighted fit is called for.")
	default:
		t.s(": the response variance differs between the ends of the range (heteroscedastic); this is expected with ").
			s(string(r.Weighting)).s(" weighting, which accounts for it.")
	}
	return c
}

// backCalcCheck: every fitted standard of non-zero nominal concentration
// passes if |%RE| ≤ BackCalcTolerancePct (BackCalcLowTolerancePct at the
// lowest non-zero level); the run passes if the passing fraction is at
// least BackCalcMinPassFraction and passing standards cover at least
// MinLevels levels (ICH M10).
func backCalcCheck(r *Report, d *dataset, pol Policy, t *text) Check {
	low := 0.0
	for _, lv := range d.levels {
		if lv.x != 0 {
			low = lv.x
			break
		}
	}
	total, pass, levelsOK := 0, 0, 0
	// passed marks the levels (by index in d.levels) with a passing standard.
	var passBuf [64]bool
	passed := passBuf[:]
	if len(d.levels) > len(passBuf) {
		passed = make([]bool, len(d.levels))
	}
	var bad *text // the standards outside tolerance, taken from the pool when there is one
	defer func() {
		if bad != nil {
			bad.free()
		}
	}()
	nbad := 0
	for k, i := range d.idx {
		p := &r.Points[i]
		if p.X == 0 {
			continue
		}
		total++
		tol := pol.BackCalcTolerancePct
		if p.X == low {
			tol = pol.BackCalcLowTolerancePct
		}
		if p.HasRelativeError && math.Abs(p.RelativeErrorPct) <= tol {
			pass++
			if l := d.level[k]; !passed[l] {
				passed[l] = true
				levelsOK++
			}
			continue
		}
		if nbad++; nbad <= 10 {
			if bad == nil {
				bad = newText()
			} else {
				bad.s("; ")
			}
			bad.point(p, i).s(": ")
			if p.HasRelativeError {
				bad.g(p.RelativeErrorPct).s(" %")
			} else {
				bad.s("cannot be read back")
			}
		}
	}
	if total == 0 {
		return notComputed(CheckBackCalculation, "no fitted standard has a non-zero nominal concentration")
	}
	frac := float64(pass) / float64(total)
	c := Check{Name: CheckBackCalculation, Statistic: frac, Limit: pol.BackCalcMinPassFraction, Computed: true,
		Passed: frac >= pol.BackCalcMinPassFraction && levelsOK >= pol.MinLevels}
	t.i(pass).s(" of ").i(total).s(" standards read back within ±").gc(pol.BackCalcTolerancePct).
		s(" % of nominal (±").gc(pol.BackCalcLowTolerancePct).s(" % at the lowest level), covering ").i(levelsOK).
		s(" level(s); required: a fraction of ").gc(pol.BackCalcMinPassFraction).s(" and ").i(pol.MinLevels).s(" levels.")
	if bad != nil {
		t.s(" Outside tolerance: ").add(bad).s(".")
	}
	return c
}

// pointName names a reading for QA staff: its level label and index.
func pointName(p *PointResult, i int) string {
	t := newText()
	defer t.free()
	return t.point(p, i).str()
}

// rSquaredCheck: R² ≥ MinRSquared (US EPA SW-846 8000D).
func rSquaredCheck(r *Report, pol Policy, t *text) Check {
	c := Check{Name: CheckRSquared, Statistic: r.RSquared, Limit: pol.MinRSquared, Computed: true, Passed: r.RSquared >= pol.MinRSquared}
	t.s("R² = ")
	if r.RSquared > 0.999 && r.RSquared < 1 {
		t.g10(r.RSquared)
	} else {
		t.g(r.RSquared)
	}
	t.s(" against a minimum of ").gc(pol.MinRSquared)
	switch {
	case r.Model == LinearOrigin:
		t.s(" (uncentred R² of the origin model, which is larger than a centred one)")
	case r.Weighting != WeightNone:
		t.s(" (weighted)")
	}
	t.s(". R² alone does not show linearity; read it with the back-calculation and Mandel checks.")
	return c
}

// rseCheck: RSE = 100·√{Σ[(x'ᵢ − xᵢ)/xᵢ]²/(n − p)} over the fitted standards
// with non-zero nominal (US EPA SW-846 8000D). Needs n > p such standards,
// each read back.
func rseCheck(r *Report, d *dataset, pol Policy, t *text) Check {
	p := nParams(r.Model)
	var ss float64
	n := 0
	for _, i := range d.idx {
		pt := &r.Points[i]
		if pt.X == 0 {
			continue
		}
		if !pt.HasBackCalc {
			return notComputed(CheckRSE, pointName(pt, i)+" cannot be read back from the curve")
		}
		e := (pt.BackCalculated - pt.X) / pt.X
		ss += e * e
		n++
	}
	if n-p < 1 {
		return notComputed(CheckRSE, "too few standards with non-zero nominal concentration ("+itoa(n)+") for "+itoa(p)+" coefficients")
	}
	rse := 100 * math.Sqrt(ss/float64(n-p))
	c := Check{Name: CheckRSE, Statistic: rse, Limit: pol.MaxRSEPct, Computed: true, Passed: rse <= pol.MaxRSEPct}
	t.s("RSE = ").g(rse).s(" % over ").i(n).s(" standards (n − p = ").i(n - p).
		s(") against a maximum of ").gc(pol.MaxRSEPct).s(" %.")
	return c
}

// interceptCheck: t = b0/SE(b0) against t(1−α/2; df). For the origin model
// the intercept of the line fitted with the same weights is tested: a
// significant intercept means forcing the curve through zero is not
// justified.
func interceptCheck(r *Report, des *design, f lsq, pol Policy, t *text) Check {
	b0, v0, df := 0.0, 0.0, f.df
	if r.Model == LinearOrigin {
		if des.k < 2 {
			return notComputed(CheckIntercept, "the line with intercept needs three or more readings")
		}
		line, err := des.fit(Linear)
		if err != nil {
			return notComputed(CheckIntercept, "the line with intercept could not be fitted: "+err.Error())
		}
		b0, v0, df = line.beta[0], line.s*line.s*line.xtwx[0], line.df
	} else {
		b0, v0 = f.beta[0], f.s*f.s*f.xtwx[0]
	}
	se := math.Sqrt(v0)
	if !(se > 0) {
		return notComputed(CheckIntercept, "the standard error of the intercept is zero (an exact fit)")
	}
	ts := b0 / se
	tc := studentT(1-pol.InterceptAlpha/2, df)
	c := Check{Name: CheckIntercept, Statistic: ts, Limit: tc, Computed: true, Passed: math.Abs(ts) <= tc}
	t.s("Intercept ")
	if r.Model == LinearOrigin {
		t.s("of the unconstrained line ")
	}
	t.g(b0).s(" ± ").g(se).s(" (SE), t = ").g(ts)
	if c.Passed {
		t.s(", |t| ≤ ")
	} else {
		t.s(", |t| > ")
	}
	t.s("t(").gc(1 - pol.InterceptAlpha/2).s("; ").i(df).s(") = ").gc(tc)
	switch {
	case c.Passed:
		t.s(": the intercept does not differ significantly from zero.")
	case r.Model == LinearOrigin:
		t.s(": the intercept differs significantly from zero, so forcing the curve through the origin is not justified.")
	default:
		t.s(": the intercept differs significantly from zero (blank contribution or matrix effect); review the blank.")
	}
	return c
}
