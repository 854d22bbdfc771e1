package calib

import (
	"cmp"
	"math"
	"slices"
	"strings"
	"sync"
)

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
// dataset d with normalised weights w.
func computeChecks(r *Report, d *dataset, des *design, f lsq, w []float64, pol Policy) []Check {
	nz := make([]float64, 0, len(d.levels))
	for _, lv := range d.levels {
		nz = append(nz, lv.x)
	}
	checks := []Check{
		minLevelsCheck(nz, pol),
		mandelCheck(r, d, des, f, pol),
		lackOfFitCheck(d, f, w, pol),
		homoscedasticityCheck(r, d, pol),
		backCalcCheck(r, d, pol),
		rSquaredCheck(r, pol),
		rseCheck(r, d, pol),
		interceptCheck(r, des, f, pol),
		runsCheck(r, d, f, pol),
		outlierCheck(r, d, pol),
	}
	for i := range checks {
		c := &checks[i]
		c.Source = checkSource(c.Name, r.Model)
		c.Mandatory = pol.mandatory(c.Name)
		if !c.Computed {
			c.Passed = false
			if c.Mandatory {
				c.Detail += mandatoryNote
			}
		}
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
func minLevelsCheck(xs []float64, pol Policy) Check {
	k := 0
	for _, x := range xs {
		if x != 0 {
			k++
		}
	}
	c := Check{Name: CheckMinLevels, Statistic: float64(k), Limit: float64(pol.MinLevels), Computed: true,
		Passed: k >= pol.MinLevels, Source: checkSource(CheckMinLevels, "")}
	c.Detail = itoa(k) + " non-zero concentration level(s) in the fit; at least " + itoa(pol.MinLevels) +
		" are required. Zero-concentration standards (blank, zero sample) are not counted."
	return c
}

// mandelCheck: DS² = (N−2)s1² − (N−3)s2² from the line (s1) and the
// quadratic (s2) with the same weights; PG = DS²/s2² against
// F(1−α; 1, N−3) (ISO 8466-1). For linear models PG ≤ F passes (the line is
// adequate); for the quadratic PG > F passes (the quadratic term is
// justified, ISO 8466-2). The origin model is judged by the curvature of the
// unconstrained line. Needs N ≥ 4 readings at three or more levels.
func mandelCheck(r *Report, d *dataset, des *design, f lsq, pol Policy) Check {
	n := len(d.x)
	if n < 4 || len(d.levels) < 3 {
		return notComputed(CheckMandel, "Mandel's test needs at least 4 readings at 3 or more concentrations")
	}
	if des.k < 3 {
		return notComputed(CheckMandel, "the quadratic term x² is outside the numerically usable range")
	}
	line, quad := f, f
	var err error
	if r.Model != Linear {
		if line, err = des.fit(Linear); err != nil {
			return notComputed(CheckMandel, "the line could not be fitted: "+err.Error())
		}
	}
	if r.Model != Quadratic {
		if quad, err = des.fit(Quadratic); err != nil {
			return notComputed(CheckMandel, "the quadratic could not be fitted: "+err.Error())
		}
	}
	ds2 := math.Max(line.ssr-quad.ssr, 0) // (N−2)s1² − (N−3)s2²
	s22 := quad.ssr / float64(n-3)
	if !(s22 > 0) {
		return notComputed(CheckMandel, "the quadratic fits the readings exactly, so the test statistic is undefined")
	}
	pg := ds2 / s22
	fc := fQuantile(1-pol.MandelAlpha, 1, n-3)
	c := Check{Name: CheckMandel, Statistic: pg, Limit: fc, Computed: true}
	crit := "F(" + fmtG(1-pol.MandelAlpha) + "; 1, " + itoa(n-3) + ") = " + fmtG(fc)
	better := pg > fc
	if r.Model == Quadratic {
		c.Passed = better
		if better {
			c.Detail = "PG = " + fmtG(pg) + " > " + crit + ": the quadratic fits significantly better than a line, so the quadratic model is justified."
		} else {
			c.Detail = "PG = " + fmtG(pg) + " ≤ " + crit + ": the quadratic does not fit significantly better than a line; a linear model should be used."
		}
		return c
	}
	c.Passed = !better
	if better {
		c.Detail = "PG = " + fmtG(pg) + " > " + crit + ": a quadratic fits significantly better, so the response is not linear over this range; consider a narrower range or the quadratic model."
	} else {
		c.Detail = "PG = " + fmtG(pg) + " ≤ " + crit + ": a quadratic does not fit significantly better; the response is linear over this range."
	}
	if r.Model == LinearOrigin {
		c.Detail += " (Tested on the line with intercept, which shows the curvature of the readings.)"
	}
	return c
}

// lackOfFitCheck: SSpe = ΣΣw(y − ȳ_level,w)², df n−k; SSlof = SSres − SSpe,
// df k−p; F = [SSlof/(k−p)]/[SSpe/(n−k)] against F(1−α; k−p, n−k)
// (Montgomery). Needs replicates (n > k) and k > p levels; never passes by
// default.
func lackOfFitCheck(d *dataset, f lsq, w []float64, pol Policy) Check {
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
	sslof := math.Max(f.ssr-sspe, 0)
	fs := (sslof / float64(k-p)) / (sspe / float64(n-k))
	fc := fQuantile(1-pol.LackOfFitAlpha, k-p, n-k)
	c := Check{Name: CheckLackOfFit, Statistic: fs, Limit: fc, Computed: true, Passed: fs <= fc}
	crit := "F(" + fmtG(1-pol.LackOfFitAlpha) + "; " + itoa(k-p) + ", " + itoa(n-k) + ") = " + fmtG(fc)
	if c.Passed {
		c.Detail = "F = " + fmtG(fs) + " ≤ " + crit + ": the scatter of the level means about the curve is consistent with the scatter of the replicates."
	} else {
		c.Detail = "F = " + fmtG(fs) + " > " + crit + ": the level means deviate from the curve more than the replicates scatter; the model does not describe the data."
	}
	return c
}

// homoscedasticityCheck: PG = larger/smaller of s² at the lowest and the
// highest level against F(1−α; n_larger−1, n_smaller−1) (ISO 8466-1). Needs
// two or more readings at both ends and a non-zero smaller variance.
func homoscedasticityCheck(r *Report, d *dataset, pol Policy) Check {
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
	crit := "F(" + fmtG(1-pol.HomoscedasticityAlpha) + "; " + itoa(dn) + ", " + itoa(dd) + ") = " + fmtG(fc)
	if c.Passed {
		c.Detail = "Variance ratio " + fmtG(pg) + " ≤ " + crit + ": the response variance at the lowest and highest standard does not differ significantly."
	} else {
		c.Detail = "Variance ratio " + fmtG(pg) + " > " + crit + ": the response variance differs between the ends of the range (heteroscedastic)"
		if r.Weighting == WeightNone {
			c.Detail += "; a weighted fit is called for."
		} else {
			c.Detail += "; this is expected with " + string(r.Weighting) + " weighting, which accounts for it."
		}
	}
	return c
}

// backCalcCheck: every fitted standard of non-zero nominal concentration
// passes if |%RE| ≤ BackCalcTolerancePct (BackCalcLowTolerancePct at the
// lowest non-zero level); the run passes if the passing fraction is at
// least BackCalcMinPassFraction and passing standards cover at least
// MinLevels levels (ICH M10).
func backCalcCheck(r *Report, d *dataset, pol Policy) Check {
	low := 0.0
	for _, lv := range d.levels {
		if lv.x != 0 {
			low = lv.x
			break
		}
	}
	total, pass := 0, 0
	levelsOK := make(map[float64]bool)
	var bad []string
	for _, i := range d.idx {
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
			levelsOK[p.X] = true
			continue
		}
		if len(bad) < 10 {
			s := pointName(p, i) + ": "
			if p.HasRelativeError {
				s += fmtG(p.RelativeErrorPct) + " %"
			} else {
				s += "cannot be read back"
			}
			bad = append(bad, s)
		}
	}
	if total == 0 {
		return notComputed(CheckBackCalculation, "no fitted standard has a non-zero nominal concentration")
	}
	frac := float64(pass) / float64(total)
	c := Check{Name: CheckBackCalculation, Statistic: frac, Limit: pol.BackCalcMinPassFraction, Computed: true,
		Passed: frac >= pol.BackCalcMinPassFraction && len(levelsOK) >= pol.MinLevels}
	c.Detail = itoa(pass) + " of " + itoa(total) + " standards read back within ±" + fmtG(pol.BackCalcTolerancePct) +
		" % of nominal (±" + fmtG(pol.BackCalcLowTolerancePct) + " % at the lowest level), covering " + itoa(len(levelsOK)) +
		" level(s); required: a fraction of " + fmtG(pol.BackCalcMinPassFraction) + " and " + itoa(pol.MinLevels) + " levels."
	if len(bad) > 0 {
		c.Detail += " Outside tolerance: " + strings.Join(bad, "; ") + "."
	}
	return c
}

// pointName names a reading for QA staff: its level label and index.
func pointName(p *PointResult, i int) string {
	if p.Level != "" {
		return p.Level + " (reading " + itoa(i) + ", x = " + fmtG(p.X) + ")"
	}
	return "reading " + itoa(i) + " (x = " + fmtG(p.X) + ")"
}

// rSquaredCheck: R² ≥ MinRSquared (US EPA SW-846 8000D).
func rSquaredCheck(r *Report, pol Policy) Check {
	c := Check{Name: CheckRSquared, Statistic: r.RSquared, Limit: pol.MinRSquared, Computed: true, Passed: r.RSquared >= pol.MinRSquared}
	c.Detail = "R² = " + strconvF(r.RSquared) + " against a minimum of " + fmtG(pol.MinRSquared)
	switch {
	case r.Model == LinearOrigin:
		c.Detail += " (uncentred R² of the origin model, which is larger than a centred one)"
	case r.Weighting != WeightNone:
		c.Detail += " (weighted)"
	}
	c.Detail += ". R² alone does not show linearity; read it with the back-calculation and Mandel checks."
	return c
}

// strconvF formats an R² with enough digits to tell 0.9999 from 0.99995.
func strconvF(v float64) string {
	if v > 0.999 && v < 1 {
		return fmtG10(v)
	}
	return fmtG(v)
}

// rseCheck: RSE = 100·√{Σ[(x'ᵢ − xᵢ)/xᵢ]²/(n − p)} over the fitted standards
// with non-zero nominal (US EPA SW-846 8000D). Needs n > p such standards,
// each read back.
func rseCheck(r *Report, d *dataset, pol Policy) Check {
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
	c.Detail = "RSE = " + fmtG(rse) + " % over " + itoa(n) + " standards (n − p = " + itoa(n-p) + ") against a maximum of " + fmtG(pol.MaxRSEPct) + " %."
	return c
}

// interceptCheck: t = b0/SE(b0) against t(1−α/2; df). For the origin model
// the intercept of the line fitted with the same weights is tested: a
// significant intercept means forcing the curve through zero is not
// justified.
func interceptCheck(r *Report, des *design, f lsq, pol Policy) Check {
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
	crit := "t(" + fmtG(1-pol.InterceptAlpha/2) + "; " + itoa(df) + ") = " + fmtG(tc)
	head := "Intercept " + fmtG(b0) + " ± " + fmtG(se) + " (SE), t = " + fmtG(ts)
	if r.Model == LinearOrigin {
		head = "Intercept of the unconstrained line " + fmtG(b0) + " ± " + fmtG(se) + " (SE), t = " + fmtG(ts)
	}
	if c.Passed {
		c.Detail = head + ", |t| ≤ " + crit + ": the intercept does not differ significantly from zero."
	} else {
		c.Detail = head + ", |t| > " + crit + ": the intercept differs significantly from zero"
		if r.Model == LinearOrigin {
			c.Detail += ", so forcing the curve through the origin is not justified."
		} else {
			c.Detail += " (blank contribution or matrix effect); review the blank."
		}
	}
	return c
}

// runsCheck: Wald–Wolfowitz runs test on the residual signs of the fitted
// readings sorted by concentration (replicates by response, so the order
// does not depend on input order); zero residuals are dropped. Few runs
// indicate curvature, so the test is one-sided: P(R ≤ r_obs) from the exact
// distribution against RunsAlpha. Limit is the largest significant number
// of runs (0 when none is: too few residuals of a sign).
func runsCheck(r *Report, d *dataset, f lsq, pol Policy) Check {
	order := make([]int, len(d.x))
	for i := range order {
		order[i] = i
	}
	slices.SortFunc(order, func(a, b int) int {
		if c := cmp.Compare(d.x[a], d.x[b]); c != 0 {
			return c
		}
		return cmp.Compare(d.y[a], d.y[b])
	})
	scale := 0.0
	for _, y := range d.y {
		scale = math.Max(scale, math.Abs(y))
	}
	n1, n2, runs, last := 0, 0, 0, 0
	for _, i := range order {
		e := f.resid[i]
		if math.Abs(e) <= 1e-13*scale {
			continue
		}
		sg := 1
		if e < 0 {
			sg = -1
		}
		if sg > 0 {
			n1++
		} else {
			n2++
		}
		if sg != last {
			runs++
			last = sg
		}
	}
	if n1 == 0 || n2 == 0 {
		return notComputed(CheckResidualRuns, "every non-zero residual has the same sign, so the runs test is undefined (this itself points to a biased curve)")
	}
	dist := runsDist(n1, n2)
	pv, cum, crit := 0.0, 0.0, 0
	for k := 2; k < len(dist); k++ {
		cum += dist[k]
		if k == runs {
			pv = math.Min(cum, 1)
		}
		if cum <= pol.RunsAlpha {
			crit = k
		}
	}
	c := Check{Name: CheckResidualRuns, Statistic: float64(runs), Limit: float64(crit), Computed: true, Passed: pv > pol.RunsAlpha}
	c.Detail = itoa(runs) + " runs of residual signs (" + itoa(n1) + " positive, " + itoa(n2) + " negative), P(R ≤ " + itoa(runs) + ") = " + fmtG(pv)
	if c.Passed {
		c.Detail += " > " + fmtG(pol.RunsAlpha) + ": no sign of systematic curvature."
	} else {
		c.Detail += " ≤ " + fmtG(pol.RunsAlpha) + ": too few runs, the residuals follow a pattern (curvature or a wrong model)."
	}
	if crit == 0 {
		c.Detail += " With so few residuals of each sign no run count is significant; the test has no power here."
	}
	return c
}

// runsDist returns P(R = r) for r = 0..n1+n2, the exact distribution of
// the number of runs R in a random sequence of n1 and n2 signs (Wald &
// Wolfowitz 1940): P(R = 2h) = 2·C(n1−1, h−1)·C(n2−1, h−1)/C(n1+n2, n1),
// P(R = 2h+1) = [C(n1−1, h)·C(n2−1, h−1) + C(n1−1, h−1)·C(n2−1, h)]/C(n1+n2, n1).
// Binomials come from log-gamma, so large runs do not overflow.
func runsDist(n1, n2 int) []float64 {
	if n1+n2 <= maxCachedRuns {
		if v, ok := runsCache.Load([2]int{n1, n2}); ok {
			return v.([]float64)
		}
	}
	p := computeRunsDist(n1, n2)
	if n1+n2 <= maxCachedRuns {
		runsCache.Store([2]int{n1, n2}, p)
	}
	return p
}

// runsCache holds runsDist by (n1, n2) for runs of up to maxCachedRuns
// readings (at most 200² small entries); the same splits recur run after
// run. Callers must not modify the returned slice.
var runsCache sync.Map

const maxCachedRuns = 200

func computeRunsDist(n1, n2 int) []float64 {
	n := n1 + n2
	lt := lchoose(n, n1)
	a := make([]float64, n1+1) // log C(n1−1, h)
	b := make([]float64, n2+1) // log C(n2−1, h)
	for h := range a {
		a[h] = lchoose(n1-1, h)
	}
	for h := range b {
		b[h] = lchoose(n2-1, h)
	}
	at := func(v []float64, h int) float64 {
		if h < 0 || h >= len(v) {
			return math.Inf(-1)
		}
		return v[h]
	}
	p := make([]float64, n+1)
	for r := 2; r <= n; r++ {
		h := r / 2
		if r%2 == 0 {
			p[r] = 2 * math.Exp(at(a, h-1)+at(b, h-1)-lt)
		} else {
			p[r] = math.Exp(at(a, h)+at(b, h-1)-lt) + math.Exp(at(a, h-1)+at(b, h)-lt)
		}
	}
	return p
}

// runsCDF returns P(R ≤ r) (see runsDist).
func runsCDF(r, n1, n2 int) float64 {
	p := runsDist(n1, n2)
	var c float64
	for k := 2; k <= r && k < len(p); k++ {
		c += p[k]
	}
	return math.Min(c, 1)
}

// lchoose returns log C(n, k), −Inf when k < 0 or k > n.
func lchoose(n, k int) float64 {
	if k < 0 || k > n || n < 0 {
		return math.Inf(-1)
	}
	a, _ := math.Lgamma(float64(n + 1))
	b, _ := math.Lgamma(float64(k + 1))
	c, _ := math.Lgamma(float64(n - k + 1))
	return a - b - c
}

// outlierCheck: every fitted reading must have |internally studentised
// residual| ≤ OutlierStudentized and Cook's distance ≤ OutlierCooksD
// (common practice). Statistic is the largest |studentised residual|.
func outlierCheck(r *Report, d *dataset, pol Policy) Check {
	maxR, maxD := 0.0, 0.0
	var bad []string
	lev1 := 0
	for _, i := range d.idx {
		p := &r.Points[i]
		if 1-p.Leverage <= 1e-10 {
			lev1++
		}
		a := math.Abs(p.Studentized)
		maxR = math.Max(maxR, a)
		maxD = math.Max(maxD, p.CooksDistance)
		if (a > pol.OutlierStudentized || p.CooksDistance > pol.OutlierCooksD) && len(bad) < 10 {
			bad = append(bad, pointName(p, i)+": studentised "+fmtG(p.Studentized)+", Cook's D "+fmtG(p.CooksDistance))
		}
	}
	c := Check{Name: CheckOutliers, Statistic: maxR, Limit: pol.OutlierStudentized, Computed: true,
		Passed: maxR <= pol.OutlierStudentized && maxD <= pol.OutlierCooksD}
	c.Detail = "Largest |studentised residual| " + fmtG(maxR) + " (limit " + fmtG(pol.OutlierStudentized) +
		"), largest Cook's distance " + fmtG(maxD) + " (limit " + fmtG(pol.OutlierCooksD) + ")."
	if len(bad) > 0 {
		c.Detail += " Flagged: " + strings.Join(bad, "; ") + "."
	}
	if lev1 > 0 {
		c.Detail += " " + itoa(lev1) + " reading(s) have leverage 1 (the curve passes through them), so their residuals cannot be studentised."
	}
	return c
}
