package calib

import (
	"math"
	"slices"
	"strings"
	"testing"
)

func checkByName(t *testing.T, r *Report, name string) Check {
	t.Helper()
	for _, c := range r.Checks {
		if c.Name == name {
			return c
		}
	}
	t.Fatalf("no check %s", name)
	return Check{}
}

func singles(pts []Point) []Point {
	var out []Point
	for i := 0; i < len(pts); i += 2 {
		out = append(out, pts[i])
	}
	return out
}

func TestChecks(t *testing.T) {
	t.Run("good weighted run passes", func(t *testing.T) {
		r := fitOrFatal(t, photometerPoints(), Options{Weighting: WeightInvX2})
		assertFinite(t, r)
		if r.Verdict != "pass" {
			t.Errorf("verdict %s; checks %+v", r.Verdict, r.Checks)
		}
		for _, c := range r.Checks {
			if !c.Computed {
				t.Errorf("%s not computed on replicated data: %s", c.Name, c.Detail)
			}
			if c.Source == "" || c.Detail == "" {
				t.Errorf("%s: empty source or detail", c.Name)
			}
			if got, want := c.Mandatory, slices.Contains(DefaultPolicy().Mandatory, c.Name); got != want {
				t.Errorf("%s: mandatory %v, want %v", c.Name, got, want)
			}
		}
	})
	t.Run("no replicates: lack of fit never passes by default", func(t *testing.T) {
		r := fitOrFatal(t, singles(photometerPoints()), Options{Weighting: WeightInvX2})
		for _, name := range []string{CheckLackOfFit, CheckHomoscedasticity} {
			c := checkByName(t, r, name)
			if c.Computed || c.Passed || !strings.Contains(c.Detail, "Not computed") {
				t.Errorf("%s: computed %v passed %v detail %q", name, c.Computed, c.Passed, c.Detail)
			}
		}
	})
	t.Run("mandatory check not computed fails the verdict", func(t *testing.T) {
		pol := DefaultPolicy()
		pol.Mandatory = append(pol.Mandatory, CheckLackOfFit)
		r := fitOrFatal(t, singles(photometerPoints()), Options{Weighting: WeightInvX2, Policy: pol})
		c := checkByName(t, r, CheckLackOfFit)
		if r.Verdict != "fail" || !strings.Contains(c.Detail, "mandatory") {
			t.Errorf("verdict %s, detail %q", r.Verdict, c.Detail)
		}
	})
	t.Run("curvature: Mandel and runs fail the line, Mandel passes the quadratic", func(t *testing.T) {
		pts := curvedPoints()
		lin := fitOrFatal(t, pts, Options{Model: Linear})
		quad := fitOrFatal(t, pts, Options{Model: Quadratic})
		ml, mq := checkByName(t, lin, CheckMandel), checkByName(t, quad, CheckMandel)
		if ml.Passed || lin.Verdict != "fail" {
			t.Errorf("line on curved data: Mandel passed %v (%s), verdict %s", ml.Passed, ml.Detail, lin.Verdict)
		}
		if !mq.Passed {
			t.Errorf("quadratic: Mandel %s", mq.Detail)
		}
		// PG = [(N−2)s1² − (N−3)s2²]/s2² (ISO 8466-1) from the line and the
		// quadratic fitted to the N level means: with duplicates the test
		// takes one value per standard.
		mpts := levelMeans(pts)
		mlin := fitOrFatal(t, mpts, Options{Model: Linear})
		mquad := fitOrFatal(t, mpts, Options{Model: Quadratic})
		n := float64(mlin.N)
		s1, s2 := mlin.ResidualSD, mquad.ResidualSD
		want := ((n-2)*s1*s1 - (n-3)*s2*s2) / (s2 * s2)
		if !closeTo(ml.Statistic, want, 1e-10, 0) || !closeTo(mq.Statistic, want, 1e-10, 0) {
			t.Errorf("PG: got %v and %v, want %v", ml.Statistic, mq.Statistic, want)
		}
		if rc := checkByName(t, lin, CheckResidualRuns); rc.Passed {
			t.Errorf("runs test passed on curved residuals: %s", rc.Detail)
		}
	})
	t.Run("outlier is named", func(t *testing.T) {
		pts := singles(photometerPoints())
		pts = append(pts, Point{Level: "L5", X: 10, Y: 0.75})
		all := photometerPoints()
		pts = append(pts, all[1], all[3], all[5], all[7])
		r := fitOrFatal(t, pts, Options{})
		c := checkByName(t, r, CheckOutliers)
		if c.Passed || !strings.Contains(c.Detail, "L5 (reading 8") {
			t.Errorf("outliers: passed %v, %q", c.Passed, c.Detail)
		}
	})
	t.Run("back-calculation and RSE by their formulas", func(t *testing.T) {
		r := fitOrFatal(t, photometerPoints(), Options{Weighting: WeightNone})
		var ss float64
		pass := 0
		for _, p := range r.Points {
			e := (p.BackCalculated - p.X) / p.X
			ss += e * e
			tol := 15.0
			if p.X == 0.5 {
				tol = 20
			}
			if math.Abs(100*e) <= tol {
				pass++
			}
		}
		rse := checkByName(t, r, CheckRSE)
		if want := 100 * math.Sqrt(ss/float64(len(r.Points)-2)); !closeTo(rse.Statistic, want, 1e-12, 0) {
			t.Errorf("RSE: got %v, want %v (US EPA 8000D formula)", rse.Statistic, want)
		}
		bc := checkByName(t, r, CheckBackCalculation)
		if want := float64(pass) / 16; bc.Statistic != want {
			t.Errorf("back-calculation fraction: got %v, want %v", bc.Statistic, want)
		}
		if bc.Passed != (pass >= 12) {
			t.Errorf("back-calculation passed %v with %d/16 passing", bc.Passed, pass)
		}
	})
}

// TestRunsCDF compares the exact runs distribution with a brute-force count
// over every arrangement of n1 pluses and n2 minuses.
func TestRunsCDF(t *testing.T) {
	for _, nn := range [][2]int{{5, 5}, {3, 7}, {6, 4}, {8, 8}} {
		n1, n2 := nn[0], nn[1]
		n := n1 + n2
		counts := make([]int, n+1)
		total := 0
		for mask := 0; mask < 1<<n; mask++ {
			ones := 0
			for b := 0; b < n; b++ {
				ones += mask >> b & 1
			}
			if ones != n1 {
				continue
			}
			runs := 1
			for b := 1; b < n; b++ {
				if mask>>b&1 != mask>>(b-1)&1 {
					runs++
				}
			}
			counts[runs]++
			total++
		}
		cum := 0
		for r := 2; r <= n; r++ {
			cum += counts[r]
			if got, want := runsCDF(r, n1, n2), float64(cum)/float64(total); !closeTo(got, want, 1e-12, 1e-15) {
				t.Errorf("P(R ≤ %d | %d, %d): got %v, brute force %v", r, n1, n2, got, want)
			}
		}
	}
}

// TestLimits: ICH Q2 LOD/LOQ and ISO 11843-2 x_c from the ISO formula with
// I levels of J replicates, R = √[1/K + 1/(IJ) + x̄²/(J·Σ(xᵢ − x̄)²)], K = 1.
func TestLimits(t *testing.T) {
	pts := photometerPoints()
	r := fitOrFatal(t, pts, Options{})
	s, b0, b1 := r.ResidualSD, r.Coefficients[0], r.Coefficients[1]
	if got, want := r.Limits.LOD, 3.3*s/b1; !closeTo(got, want, 1e-14, 0) {
		t.Errorf("LOD: got %v, want %v", got, want)
	}
	if got, want := r.Limits.LOQ, 10*s/b1; !closeTo(got, want, 1e-14, 0) {
		t.Errorf("LOQ: got %v, want %v", got, want)
	}
	levels := []float64{0.5, 1, 2, 5, 10, 20, 50, 100}
	I, J := float64(len(levels)), 2.0
	var mx, sxx float64
	for _, x := range levels {
		mx += x / I
	}
	for _, x := range levels {
		sxx += (x - mx) * (x - mx)
	}
	R := math.Sqrt(1 + 1/(I*J) + mx*mx/(J*sxx))
	tq := studentT(0.95, 14)
	if got, want := r.Limits.CriticalConc, tq*s/b1*R; !closeTo(got, want, 1e-12, 0) {
		t.Errorf("x_c: got %v, want %v (ISO 11843-2)", got, want)
	}
	if got, want := r.Limits.CriticalValue, b0+tq*s*R; !closeTo(got, want, 1e-12, 0) {
		t.Errorf("y_c: got %v, want %v (ISO 11843-2)", got, want)
	}
	if got, want := r.Limits.DetectionLimit, 2*r.Limits.CriticalConc; got != want {
		t.Errorf("x_d: got %v, want %v", got, want)
	}
}

func TestAutoWeighting(t *testing.T) {
	// The photometer run with its top levels biased (+4 % at 100, −3 % at
	// 50): an unweighted line follows them and misreads the low standards.
	pts := photometerPoints()
	for i := range pts {
		switch pts[i].X {
		case 100:
			pts[i].Y *= 1.04
		case 50:
			pts[i].Y *= 0.97
		}
	}
	r := fitOrFatal(t, pts, Options{Weighting: WeightAuto})
	if len(r.WeightCandidates) != len(autoCandidates) {
		t.Fatalf("%d candidates", len(r.WeightCandidates))
	}
	chosen := 0
	for _, c := range r.WeightCandidates {
		if !c.Scored && c.Weighting != WeightInvS2 { // 1/s² needs three readings per level by default
			t.Errorf("%s skipped on replicated data: %s", c.Weighting, c.Note)
		}
		if c.Chosen {
			chosen++
			if c.Weighting != r.Weighting {
				t.Errorf("chosen %s, report says %s", c.Weighting, r.Weighting)
			}
		}
	}
	for _, c := range r.WeightCandidates {
		var best WeightScore
		for _, d := range r.WeightCandidates {
			if d.Chosen {
				best = d
			}
		}
		if c.Scored && c.MaxLevelShare <= MaxLevelWeightShare && c.SumAbsRE < best.SumAbsRE {
			t.Errorf("%s has Σ|%%RE| %v below the chosen %s's %v", c.Weighting, c.SumAbsRE, best.Weighting, best.SumAbsRE)
		}
	}
	if chosen != 1 || r.WeightingRequested != WeightAuto {
		t.Errorf("chosen %d, requested %s", chosen, r.WeightingRequested)
	}
	none, inv2 := r.WeightCandidates[0], r.WeightCandidates[3]
	if !(none.SumAbsRE > 2*inv2.SumAbsRE) || r.Weighting == WeightNone {
		t.Errorf("Σ|%%RE| none %v, 1/x² %v, chosen %s: relative scatter calls for weighting", none.SumAbsRE, inv2.SumAbsRE, r.Weighting)
	}
	t.Logf("chosen %s; scores %+v", r.Weighting, r.WeightCandidates)
	// Without replicates 1/s² is skipped, with the reason.
	r = fitOrFatal(t, singles(photometerPoints()), Options{Weighting: WeightAuto})
	last := r.WeightCandidates[len(r.WeightCandidates)-1]
	if last.Weighting != WeightInvS2 || last.Chosen || !strings.Contains(last.Note, "replicates") {
		t.Errorf("1/s^2 candidate without replicates: %+v", last)
	}
}

func TestPredictFlags(t *testing.T) {
	lin := fitOrFatal(t, photometerPoints(), Options{Weighting: WeightInvX2})
	quad := fitOrFatal(t, curvedPoints(), Options{Model: Quadratic})
	flat := fitOrFatal(t, []Point{{X: 1, Y: 1.0}, {X: 2, Y: 1.3}, {X: 3, Y: 0.8}, {X: 4, Y: 1.2}, {X: 5, Y: 0.9}}, Options{})
	tests := []struct {
		name    string
		r       *Report
		ys      []float64
		dil     float64
		want    []string
		bounded bool
	}{
		{"inside range", lin, []float64{0.5}, 1, nil, true},
		{"above range", lin, []float64{6}, 1, []string{FlagAboveRange, FlagExtrapolated}, true},
		{"below range and LOQ", lin, []float64{0.015}, 1, []string{FlagBelowRange, FlagExtrapolated, FlagBelowLOQ}, true},
		{"negative", lin, []float64{0.0}, 1, []string{FlagBelowRange, FlagExtrapolated, FlagBelowLOD, FlagBelowLOQ, FlagNegative}, true},
		{"insignificant slope: unbounded", flat, []float64{1.1}, 1, []string{FlagBelowLOD, FlagBelowLOQ, FlagUnbounded}, false},
		{"quadratic above its maximum", quad, []float64{200}, 1, []string{FlagNoRoot, FlagUnbounded}, false},
		{"quadratic inside", quad, []float64{30}, 1, nil, true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			p, err := tc.r.Predict(tc.ys, tc.dil, 0)
			if err != nil {
				t.Fatal(err)
			}
			assertFinite(t, p)
			if !slices.Equal(p.Flags, tc.want) {
				t.Errorf("flags: got %v, want %v", p.Flags, tc.want)
			}
			if p.Interval.Bounded != tc.bounded {
				t.Errorf("bounded: got %v, want %v", p.Interval.Bounded, tc.bounded)
			}
			if !p.Interval.Bounded && (p.Interval.Low != 0 || p.Interval.High != 0) {
				t.Errorf("unbounded interval carries numbers %v", p.Interval)
			}
			if p.Interval.Bounded && !(p.Interval.Low <= p.Concentration && p.Concentration <= p.Interval.High) {
				t.Errorf("estimate %v outside its interval %v", p.Concentration, p.Interval)
			}
			if len(p.Cautions) == 0 {
				t.Error("prediction without cautions")
			}
		})
	}
	t.Run("dilution multiplies after inversion", func(t *testing.T) {
		a, _ := lin.Predict([]float64{0.5, 0.52}, 0, 0)
		b, _ := lin.Predict([]float64{0.5, 0.52}, 10, 0)
		samePrediction(t, a, b, 10, 1e-14)
		if a.Dilution != 1 || b.Dilution != 10 || !slices.Equal(a.Flags, b.Flags) {
			t.Errorf("dilution %v/%v flags %v/%v", a.Dilution, b.Dilution, a.Flags, b.Flags)
		}
	})
}

// TestExcludedPoints: an excluded reading is not in the fit (the fit equals
// the fit without it) but is still reported, back-calculated, with weight 0.
func TestExcludedPoints(t *testing.T) {
	pts := photometerPoints()
	pts[9].Excluded = true
	pts[9].Y *= 1.5 // would be an outlier if fitted
	with := fitOrFatal(t, pts, Options{Weighting: WeightInvX2})
	without := fitOrFatal(t, append(append([]Point(nil), pts[:9]...), pts[10:]...), Options{Weighting: WeightInvX2})
	for j := range with.Coefficients {
		if !closeTo(with.Coefficients[j], without.Coefficients[j], 1e-12, 0) {
			t.Errorf("coefficient %d: %v with an excluded point, %v without it", j, with.Coefficients[j], without.Coefficients[j])
		}
	}
	p := with.Points[9]
	if with.N != 15 || p.Weight != 0 || !p.Excluded || !p.HasBackCalc || !p.HasRelativeError || math.Abs(p.RelativeErrorPct) < 40 {
		t.Errorf("N %d, excluded point %+v", with.N, p)
	}
	if got, want := len(with.Cautions), 3; got != want || !strings.Contains(strings.Join(with.Cautions, " "), "qualified person") {
		t.Errorf("cautions %q", with.Cautions)
	}
}
