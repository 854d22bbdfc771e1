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
		if originLine(m) {
			return "Student t-test of the intercept of the unconstrained line (whether the origin model is justified; Raposo, TrAC 77 (2016) 167)"
		}
		return "Student t-test of the intercept against zero (e.g. Miller & Miller, Statistics and Chemometrics for Analytical Chemistry, ch. 5)"
	case CheckResidualRuns:
		return "Wald–Wolfowitz runs test on the signs of the residuals in concentration order (exact distribution, one-sided: few runs indicate curvature)"
	case CheckOutliers:
		return "Common practice: |internally studentised residual| > 3 is an outlier, Cook's distance > 1 is influential"
	case CheckMonotonic:
		return "Common practice: the curve must be strictly monotonic over the working range so that each response gives one concentration (ISO 8466-2 inverts the quadratic on one branch)"
	}
	return ""
}

// computeChecks evaluates every check of the policy on the fit f of the
// dataset d with normalised weights w, appending them to checks. The Detail
// texts the checks compute are written to dt's text and set by dt.done.
func computeChecks(r *Report, d *dataset, des *design, f lsq, w []float64, nf noise, pol Policy, checks []Check, dt *details) []Check {
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
	sspe := pureError(d, w)
	checks = append(checks, mandelCheck(r, d, des, f, sspe, nf, pol, t))
	ends[1] = len(t.b)
	checks = append(checks, lackOfFitCheck(d, f, sspe, nf, pol, t))
	ends[2] = len(t.b)
	checks = append(checks, homoscedasticityCheck(r, d, nf, pol, t))
	ends[3] = len(t.b)
	checks = append(checks, backCalcCheck(r, d, pol, t))
	ends[4] = len(t.b)
	checks = append(checks, rSquaredCheck(r, pol, t))
	ends[5] = len(t.b)
	checks = append(checks, rseCheck(r, d, pol, t))
	ends[6] = len(t.b)
	checks = append(checks, interceptCheck(r, d, des, f, nf, pol, t))
	ends[7] = len(t.b)
	checks = append(checks, runsCheck(r, d, f, nf, pol, t))
	ends[8] = len(t.b)
	checks = append(checks, outlierCheck(r, d, nf, pol, t))
	ends[9] = len(t.b)
	checks = append(checks, monotonicCheck(r, t))
	ends[10] = len(t.b)
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
// unconstrained line.
//
// ISO 8466-1 takes one value per standard, so with replicates the test runs
// on the N = k level means, each the weighted mean of its level with the
// level's total weight: fitting all readings is fitting those means, and
// Σw(y − f)² over the readings = SSpe + the means' Σw(ȳ − f)², so each
// means' SSR is the readings' SSR less the pure error SSpe. The replicate
// scatter is left to the lack-of-fit test. Needs N ≥ 4 (four levels).
//
// A fit within rounding (see noise) is exact: a line that fits exactly
// has DS² = 0, and s2² is never taken below the rounding floor², so an exact
// quadratic against a line that does not fit gives a large, finite PG.
func mandelCheck(r *Report, d *dataset, des *design, f lsq, sspe float64, nf noise, pol Policy, t *text) Check {
	n, k := len(d.x), len(d.levels)
	if k < 4 {
		return notComputed(CheckMandel, "Mandel's test takes one value per level and needs 4 or more levels")
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
	means := n > k
	if means {
		lineSSR, quadSSR = max(lineSSR-sspe, 0), max(quadSSR-sspe, 0)
	}
	lineExact := withinRounding(lineSSR, k, nf.floor)
	quadExact := withinRounding(quadSSR, k, nf.floor)
	ds2 := max(lineSSR-quadSSR, 0) // (N−2)s1² − (N−3)s2²
	if lineExact {
		ds2 = 0
	}
	s22 := max(quadSSR/float64(k-3), nf.floor*nf.floor)
	if !(s22 > 0) {
		return notComputed(CheckMandel, "the quadratic fits the readings exactly, so the test statistic is undefined")
	}
	pg := ds2 / s22
	fc := fQuantile(1-pol.MandelAlpha, 1, k-3)
	c := Check{Name: CheckMandel, Statistic: pg, Limit: fc, Computed: true}
	better := pg > fc
	if means {
		t.s("On the ").i(k).s(" level means (ISO 8466-1 takes one value per standard; each mean carries its level's total weight, and the replicate scatter is judged by the lack-of-fit test): ")
	}
	switch {
	case lineExact:
		t.s(exactFitText).s(" (the line fits within rounding), so there is no curvature: ")
	case quadExact:
		t.s("The quadratic fits within floating-point rounding and the line does not (s2² taken at the rounding floor): ")
	}
	t.s("PG = ").g(pg)
	if better {
		t.s(" > ")
	} else {
		t.s(" ≤ ")
	}
	t.s("F(").g(1 - pol.MandelAlpha).s("; 1, ").i(k - 3).s(") = ").g(fc)
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
	if originLine(r.Model) {
		t.s(" (Tested on the line with intercept, which shows the curvature of the readings.)")
	}
	c.Passed = better == (r.Model == Quadratic)
	return c
}

// pureError returns SSpe = ΣΣw(y − ȳ_level,w)², the weighted scatter of
// the readings about their level's weighted mean (0 without replicates).
func pureError(d *dataset, w []float64) float64 {
	var sspe float64
	for _, lv := range d.levels {
		if lv.count < 2 {
			continue
		}
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
	return sspe
}

// lackOfFitCheck: SSpe = ΣΣw(y − ȳ_level,w)², df n−k; SSlof = SSres − SSpe,
// df k−p; F = [SSlof/(k−p)]/[SSpe/(n−k)] against F(1−α; k−p, n−k)
// (Montgomery). Needs replicates (n > k) and k > p levels; never passes by
// default. An exact fit (see noise) has no lack of fit: F = 0, passed.
func lackOfFitCheck(d *dataset, f lsq, sspe float64, nf noise, pol Policy, t *text) Check {
	n, k, p := len(d.x), len(d.levels), f.p
	if n-k < 1 {
		return notComputed(CheckLackOfFit, "no level has replicate readings, so there is no pure error to test against")
	}
	if k-p < 1 {
		return notComputed(CheckLackOfFit, "there are no more levels than coefficients ("+itoa(k)+" levels, "+itoa(p)+" coefficients)")
	}
	if nf.exact {
		fc := fQuantile(1-pol.LackOfFitAlpha, k-p, n-k)
		t.s(exactFitText).s(": the curve passes through every level within rounding, so there is no lack of fit (F = 0).")
		return Check{Name: CheckLackOfFit, Limit: fc, Computed: true, Passed: true}
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
	t.s("F(").g(1 - pol.LackOfFitAlpha).s("; ").i(k - p).s(", ").i(n - k).s(") = ").g(fc)
	if c.Passed {
		t.s(": the scatter of the level means about the curve is consistent with the scatter of the replicates.")
	} else {
		t.s(": the level means deviate from the curve more than the replicates scatter; the model does not describe the data.")
	}
	return c
}

// homoscedasticityCheck: PG = larger/smaller of s² at the lowest and the
// highest non-zero level (the ends of the working range; a blank is not
// compared) against F(1−α; n_larger−1, n_smaller−1) (ISO 8466-1). Needs two
// non-zero levels, two or more readings at both and a smaller SD above the
// rounding floor; replicates that agree within rounding at both ends pass.
func homoscedasticityCheck(r *Report, d *dataset, nf noise, pol Policy, t *text) Check {
	lo, hi := d.levels[0], d.levels[len(d.levels)-1]
	if lo.x == 0 {
		lo = d.levels[1]
	}
	if lo.x == hi.x {
		return notComputed(CheckHomoscedasticity, "there is only one non-zero level")
	}
	if lo.count < 2 || hi.count < 2 {
		return notComputed(CheckHomoscedasticity, "the lowest and the highest non-zero level both need replicate readings (two or more each)")
	}
	v1, v2 := lo.sd*lo.sd, hi.sd*hi.sd
	big, small, dn, dd := v2, v1, hi.count-1, lo.count-1
	if v1 > v2 {
		big, small, dn, dd = v1, v2, lo.count-1, hi.count-1
	}
	if fl2 := nf.floor * nf.floor; big <= fl2 {
		fc := fQuantile(1-pol.HomoscedasticityAlpha, dn, dd)
		t.s("The replicates at the lowest and the highest non-zero standard agree within floating-point rounding (an exact fit): there is no variance to compare.")
		return Check{Name: CheckHomoscedasticity, Statistic: 1, Limit: fc, Computed: true, Passed: true}
	} else if small <= fl2 {
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
	t.s("F(").g(1 - pol.HomoscedasticityAlpha).s("; ").i(dn).s(", ").i(dd).s(") = ").g(fc)
	switch {
	case c.Passed:
		t.s(": the response variance at the lowest and highest non-zero standard does not differ significantly.")
	case r.Weighting == WeightNone:
		t.s(": the response variance differs between the ends of the range (heteroscedastic); a weighted fit is called for.")
	default:
		t.s(": the response variance differs between the ends of the range (heteroscedastic); this is expected with ").
			s(string(r.Weighting)).s(" weighting, which accounts for it.")
	}
	return c
}

// backCalcMinLevelPassFraction is the fraction of a replicated level's
// standards that must pass: ICH M10 (2022) §3.2.5, with replicate
// calibrators at least 50 % per level as well as 75 % overall. Recalled from
// memory: FIELD-NOTES §5 tags ICH M10 [S partly], and this rule and its
// clause number are not among the parts read; confirm against the text.
const backCalcMinLevelPassFraction = 0.5

// backCalcCheck: every fitted standard of non-zero nominal concentration
// passes if |%RE| ≤ BackCalcTolerancePct (BackCalcLowTolerancePct at the
// LLOQ, the lowest non-zero level, which starts the working range); the run
// passes if the passing fraction is at least BackCalcMinPassFraction,
// passing standards cover at least MinLevels levels, and at every level
// with replicates at least backCalcMinLevelPassFraction of them pass (ICH
// M10).
func backCalcCheck(r *Report, d *dataset, pol Policy, t *text) Check {
	low := r.Range.Low
	total, pass, levelsOK := 0, 0, 0
	// nTot and nPass count each level's (by index in d.levels) standards
	// and passing standards.
	var totBuf, passBuf [64]int32
	nTot, nPass := totBuf[:], passBuf[:]
	if len(d.levels) > len(totBuf) {
		nTot, nPass = make([]int32, len(d.levels)), make([]int32, len(d.levels))
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
		l := d.level[k]
		nTot[l]++
		tol := pol.BackCalcTolerancePct
		if p.X == low {
			tol = pol.BackCalcLowTolerancePct
		}
		if p.HasRelativeError && math.Abs(p.RelativeErrorPct) <= tol {
			pass++
			if nPass[l]++; nPass[l] == 1 {
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
	// The replicated levels where fewer than half the standards pass.
	levelsBad, firstBad := 0, -1
	for l := range d.levels {
		if nTot[l] >= 2 && float64(nPass[l]) < backCalcMinLevelPassFraction*float64(nTot[l]) {
			if levelsBad++; firstBad < 0 {
				firstBad = l
			}
		}
	}
	frac := float64(pass) / float64(total)
	c := Check{Name: CheckBackCalculation, Statistic: frac, Limit: pol.BackCalcMinPassFraction, Computed: true,
		Passed: frac >= pol.BackCalcMinPassFraction && levelsOK >= pol.MinLevels && levelsBad == 0}
	t.i(pass).s(" of ").i(total).s(" standards read back within ±").g(pol.BackCalcTolerancePct).
		s(" % of nominal (±").g(pol.BackCalcLowTolerancePct).s(" % at the LLOQ, the lowest non-zero level), covering ").i(levelsOK).
		s(" level(s); required: a fraction of ").g(pol.BackCalcMinPassFraction).s(" and ").i(pol.MinLevels).
		s(" levels, and at least half the standards of each level with replicates (ICH M10).")
	if levelsBad > 0 {
		lv := d.levels[firstBad]
		t.s(" Fewer than half pass at ").i(levelsBad).s(" replicated level(s), first at x = ").g(lv.x).
			s(" (").i(int(nPass[firstBad])).s(" of ").i(int(nTot[firstBad])).s(").")
	}
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
	t.s(" against a minimum of ").g(pol.MinRSquared)
	switch {
	case originLine(r.Model):
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
		s(") against a maximum of ").g(pol.MaxRSEPct).s(" %.")
	return c
}

// interceptCheck: t = b0/SE(b0) against t(1−α/2; df). For the origin model
// the intercept of the line fitted with the same weights is tested: a
// significant intercept means forcing the curve through zero is not
// justified.
//
// When the tested fit is exact (see noise) its SE is rounding and the t
// ratio meaningless: the intercept is then known without random error and
// passes only if it is zero within the rounding floor (Statistic b0, Limit
// the floor).
func interceptCheck(r *Report, d *dataset, des *design, f lsq, nf noise, pol Policy, t *text) Check {
	b0, v0, df, exact := 0.0, 0.0, f.df, nf.exact
	if originLine(r.Model) {
		if des.k < 2 {
			return notComputed(CheckIntercept, "the line with intercept needs three or more readings")
		}
		line, err := des.fit(Linear)
		if err != nil {
			return notComputed(CheckIntercept, "the line with intercept could not be fitted: "+err.Error())
		}
		b0, v0, df = line.beta[0], line.s*line.s*line.xtwx[0], line.df
		exact = withinRounding(line.ssr, len(d.x), nf.floor)
	} else {
		b0, v0 = f.beta[0], f.s*f.s*f.xtwx[0]
	}
	if exact {
		c := Check{Name: CheckIntercept, Statistic: b0, Limit: nf.floor, Computed: true, Passed: math.Abs(b0) <= nf.floor}
		t.s(exactFitText).s(", so the intercept ")
		if originLine(r.Model) {
			t.s("of the unconstrained line ")
		}
		t.s("b0 = ").g(b0).s(" has no random error to test against")
		switch {
		case c.Passed:
			t.s(": it is zero within rounding (").g(nf.floor).s(").")
		case originLine(r.Model):
			t.s(": it is not zero, so forcing the curve through the origin is not justified.")
		default:
			t.s(": it is not zero (blank contribution or matrix effect); review the blank.")
		}
		return c
	}
	se := math.Sqrt(v0)
	if !(se > 0) {
		return notComputed(CheckIntercept, "the standard error of the intercept is zero (an exact fit)")
	}
	ts := b0 / se
	tc := studentT(1-pol.InterceptAlpha/2, df)
	c := Check{Name: CheckIntercept, Statistic: ts, Limit: tc, Computed: true, Passed: math.Abs(ts) <= tc}
	t.s("Intercept ")
	if originLine(r.Model) {
		t.s("of the unconstrained line ")
	}
	t.g(b0).s(" ± ").g(se).s(" (SE), t = ").g(ts)
	if c.Passed {
		t.s(", |t| ≤ ")
	} else {
		t.s(", |t| > ")
	}
	t.s("t(").g(1 - pol.InterceptAlpha/2).s("; ").i(df).s(") = ").g(tc)
	switch {
	case c.Passed:
		t.s(": the intercept does not differ significantly from zero.")
	case originLine(r.Model):
		t.s(": the intercept differs significantly from zero, so forcing the curve through the origin is not justified.")
	default:
		t.s(": the intercept differs significantly from zero (blank contribution or matrix effect); review the blank.")
	}
	return c
}
