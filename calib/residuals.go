package calib

import (
	"cmp"
	"math"
	"slices"
	"sync"
)

// runsCheck: Wald–Wolfowitz runs test on the residual signs of the fitted
// readings sorted by concentration (replicates by response, so the order
// does not depend on input order); zero residuals are dropped. Few runs
// indicate curvature, so the test is one-sided: P(R ≤ r_obs) from the exact
// distribution against RunsAlpha. Limit is the largest significant number
// of runs (0 when none is: too few residuals of a sign).
//
// Residuals within the rounding floor (see noise) count as zero; an exact
// fit has none left and passes (no pattern).
func runsCheck(r *Report, d *dataset, f lsq, nf noise, pol Policy, t *text) Check {
	if nf.exact {
		t.s(exactFitText).s(": there are no residual signs to follow, so no pattern.")
		return Check{Name: CheckResidualRuns, Computed: true, Passed: true}
	}
	// d.order is sorted by x; sort each level's readings by y (insertion
	// sort: a level holds a few replicates). Readings with equal x and y
	// have equal residuals, so any such order gives the same runs.
	var buf [64]int
	order := buf[:0]
	if len(d.order) > len(buf) {
		order = make([]int, 0, len(d.order))
	}
	order = append(order, d.order...)
	byY := func(a, b int) int { return cmp.Compare(d.y[a], d.y[b]) }
	for a := 0; a < len(order); {
		b := a + 1
		for b < len(order) && d.x[order[b]] == d.x[order[a]] {
			b++
		}
		if run := order[a:b]; len(run) > 16 {
			slices.SortFunc(run, byY)
		} else {
			for k := 1; k < len(run); k++ {
				i, j := run[k], k
				for ; j > 0 && d.y[run[j-1]] > d.y[i]; j-- {
					run[j] = run[j-1]
				}
				run[j] = i
			}
		}
		a = b
	}
	n1, n2, runs, last := 0, 0, 0, 0
	for _, i := range order {
		e := f.resid[i]
		if math.Abs(e) <= nf.floor {
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
			pv = min(cum, 1)
		}
		if cum <= pol.RunsAlpha {
			crit = k
		}
	}
	c := Check{Name: CheckResidualRuns, Statistic: float64(runs), Limit: float64(crit), Computed: true, Passed: pv > pol.RunsAlpha}
	t.i(runs).s(" runs of residual signs (").i(n1).s(" positive, ").i(n2).s(" negative), P(R ≤ ").i(runs).s(") = ").g(pv)
	if c.Passed {
		t.s(" > ").g(pol.RunsAlpha).s(": no sign of systematic curvature.")
	} else {
		t.s(" ≤ ").g(pol.RunsAlpha).s(": too few runs, the residuals follow a pattern (curvature or a wrong model).")
	}
	if crit == 0 {
		t.s(" With so few residuals of each sign no run count is significant; the test has no power here.")
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
	return min(c, 1)
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
// (common practice). Statistic is the largest |studentised residual|. An
// exact fit (see noise) has none: its readings' studentised residuals and
// Cook's distances are 0 (build), and the text says why.
func outlierCheck(r *Report, d *dataset, nf noise, pol Policy, t *text) Check {
	maxR, maxD := 0.0, 0.0
	var bad *text // the flagged readings, taken from the pool when there is one
	defer func() {
		if bad != nil {
			bad.free()
		}
	}()
	nbad, lev1 := 0, 0
	for _, i := range d.idx {
		p := &r.Points[i]
		if 1-p.Leverage <= 1e-10 {
			lev1++
		}
		a := math.Abs(p.Studentized)
		maxR = max(maxR, a)
		maxD = max(maxD, p.CooksDistance)
		if a > pol.OutlierStudentized || p.CooksDistance > pol.OutlierCooksD {
			if nbad++; nbad <= 10 {
				if bad == nil {
					bad = newText()
				} else {
					bad.s("; ")
				}
				bad.point(p, i).s(": studentised ").g(p.Studentized).s(", Cook's D ").g(p.CooksDistance)
			}
		}
	}
	c := Check{Name: CheckOutliers, Statistic: maxR, Limit: pol.OutlierStudentized, Computed: true,
		Passed: maxR <= pol.OutlierStudentized && maxD <= pol.OutlierCooksD}
	t.s("Largest |studentised residual| ").g(maxR).s(" (limit ").g(pol.OutlierStudentized).
		s("), largest Cook's distance ").g(maxD).s(" (limit ").g(pol.OutlierCooksD).s(").")
	if bad != nil {
		t.s(" Flagged: ").add(bad).s(".")
	}
	if nf.exact {
		t.s(" ").s(exactFitText).s(", so no reading stands out; studentising would only magnify rounding, and studentised residuals and Cook's distances are reported as 0.")
	}
	if lev1 > 0 {
		t.s(" ").i(lev1).s(" reading(s) have leverage 1 (the curve passes through them), so their residuals cannot be studentised.")
	}
	return c
}
