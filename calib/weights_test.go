package calib

import (
	"math"
	"slices"
	"strings"
	"testing"
)

// nitrateDemoPoints is invented demo-like data: a UV-Vis nitrate (as N)
// run, 0.2 to 10 mg/L, two or three readings per level, with the three
// readings of the lowest standard agreeing to the last digit by chance
// (their SD is about 1/100 of the next level's), the situation in which a
// level's own 1/s² gave the lowest standard nearly all the weight.
func nitrateDemoPoints() []Point {
	levels := []struct {
		label string
		x     float64
		y     []float64
	}{
		{"N1", 0.2, []float64{0.02026, 0.02026, 0.02027}},
		{"N2", 0.5, []float64{0.04513, 0.04468, 0.04395}},
		{"N3", 1, []float64{0.08584, 0.08523}},
		{"N4", 2, []float64{0.16723, 0.16747, 0.16933}},
		{"N5", 4, []float64{0.33260, 0.33044}},
		{"N6", 6, []float64{0.48700, 0.49446, 0.50076}},
		{"N7", 8, []float64{0.65633, 0.65516}},
		{"N8", 10, []float64{0.80471, 0.81593, 0.82382}},
	}
	var pts []Point
	for _, l := range levels {
		for _, y := range l.y {
			pts = append(pts, Point{Level: l.label, X: l.x, Y: y})
		}
	}
	return pts
}

// TestNitrateDemoWeighting reproduces the demo's problem: weighting each
// standard by 1/s² of its own two or three readings gives the lowest level
// nearly all the weight and an ICH Q2 LOD hundreds of times below the lowest
// standard. Under auto no level may hold more than half of the total weight
// (common practice) and the LOD must be plausible against the lowest
// standard, 0.2 mg/L (invented demo data).
func TestNitrateDemoWeighting(t *testing.T) {
	pts := nitrateDemoPoints()
	// The old scheme, each reading weighted by 1/s² of its own level.
	d, err := prepare(pts, Linear)
	if err != nil {
		t.Fatal(err)
	}
	own := make([]float64, len(d.x))
	for _, lv := range d.levels {
		for _, i := range lv.idx {
			own[i] = 1 / (lv.sd * lv.sd)
		}
	}
	normalise(own)
	if share := d.heaviestLevel(own); share.X != 0.2 || share.Share < 0.99 {
		t.Fatalf("own-level 1/s²: heaviest level %+v; the demo's problem needs the lowest level above 99 %%", share)
	}
	old, err := fitWeights(pts, Options{Weighting: WeightNone}, own)
	if err != nil {
		t.Fatal(err)
	}
	// calib/1.0.0's LOD, 3.3·s(y/x)/b1 on the Σw = n scale.
	oldLOD := 3.3 * old.ResidualSD / old.Coefficients[1]
	if oldLOD > 0.2/50 {
		t.Fatalf("own-level 1/s²: LOD %v is not the implausible value the demo showed", oldLOD)
	}

	r := fitOrFatal(t, pts, Options{Weighting: WeightAuto})
	if r.HeaviestLevel.Share > MaxLevelWeightShare || slices.Contains(r.Flags, FitFlagDominantLevel) {
		t.Errorf("auto chose %s: level at %v holds %.1f %% of the weight, flags %v", r.Weighting, r.HeaviestLevel.X, 100*r.HeaviestLevel.Share, r.Flags)
	}
	var sum float64
	shares := map[float64]float64{}
	for _, p := range r.Points {
		sum += p.Weight
		shares[p.X] += p.Weight
	}
	for x, s := range shares {
		if s/sum > MaxLevelWeightShare {
			t.Errorf("level %v holds %.1f %% of Σw", x, 100*s/sum)
		}
	}
	if lod := r.Limits.LOD; !(lod > 0.2/20 && lod < 0.2) {
		t.Errorf("LOD %v mg/L against a lowest standard of 0.2 mg/L (σ basis %s)", lod, r.Limits.SigmaBasis)
	}
	if r.WeightingAdvised != r.Weighting {
		t.Errorf("auto used %s but advises %s", r.Weighting, r.WeightingAdvised)
	}
	// 1/s² is not a candidate: three levels have two readings, fewer than
	// the default minimum of three.
	for _, c := range r.WeightCandidates {
		if c.Weighting == WeightInvS2 && (c.Scored || !strings.Contains(c.Note, "minimum of 3")) {
			t.Errorf("1/s² candidate on two-reading levels: %+v", c)
		}
	}
	t.Logf("auto: %s, heaviest level %v with %.1f %%, LOD %.4g mg/L (%s); own-level 1/s² LOD %.2g", r.Weighting,
		r.HeaviestLevel.X, 100*r.HeaviestLevel.Share, r.Limits.LOD, r.Limits.SigmaBasis, oldLOD)

	// The same run fits the same way every time it is posted.
	again := fitOrFatal(t, pts, Options{Weighting: WeightAuto})
	if again.Weighting != r.Weighting || again.Limits.LOD != r.Limits.LOD {
		t.Errorf("refit: %s %v, first %s %v", again.Weighting, again.Limits.LOD, r.Weighting, r.Limits.LOD)
	}
}

// TestVarianceFunction: 1/s² weights come from s(x) = e^a·x^θ fitted by
// least squares to log(level SD) over log(x) (power variance model, nlme
// varPower, FIELD-NOTES §9 [S]). Readings m−s, m, m+s have sample SD s
// exactly, so level SDs built as 0.004·x^0.7 must give θ = 0.7 and
// e^a = 0.004 [C], and every weight is 1/s(x)² normalised to Σw = n.
func TestVarianceFunction(t *testing.T) {
	var pts []Point
	levels := []float64{0.5, 1, 2, 5, 10, 20}
	for i, x := range levels {
		s := 0.004 * math.Pow(x, 0.7)
		m := 0.01 + 0.05*x
		for _, y := range []float64{m - s, m, m + s} {
			pts = append(pts, Point{Level: "V" + itoa(i+1), X: x, Y: y})
		}
	}
	pts = append(pts, Point{Level: "B", X: 0, Y: 0.011}, Point{Level: "B", X: 0, Y: 0.009}, Point{Level: "B", X: 0, Y: 0.010})
	r := fitOrFatal(t, pts, Options{Weighting: WeightInvS2})
	if r.Variance.Kind != "power" || !closeTo(r.Variance.C1, 0.7, 1e-12, 0) || !closeTo(r.Variance.C0, 0.004, 1e-12, 0) {
		t.Errorf("variance function %+v, want power 0.004·x^0.7 (constructed)", r.Variance)
	}
	if slices.Contains(r.Flags, FitFlagFewReplicates) {
		t.Errorf("three readings at every level, flags %v", r.Flags)
	}
	raw := make([]float64, len(pts))
	for i, p := range pts {
		x := math.Max(p.X, 0.5) // blanks weighted as the lowest non-zero standard
		s := 0.004 * math.Pow(x, 0.7)
		raw[i] = 1 / (s * s)
	}
	normalise(raw)
	for i, p := range r.Points {
		if !closeTo(p.Weight, raw[i], 1e-10, 0) {
			t.Errorf("reading %d (x = %v): weight %v, want 1/s(x)² normalised %v", i, p.X, p.Weight, raw[i])
		}
	}
	// An unknown's weight comes from the same function.
	if got, want := r.unknownWeight(7, 0), r.WeightScale*math.Pow(0.5/7, 1.4); !closeTo(got, want, 1e-12, 0) {
		t.Errorf("w0 at x = 7: %v, want %v", got, want)
	}
	// Fewer than three non-zero levels with an SD: no variance function.
	few := []Point{{X: 1, Y: 1}, {X: 1, Y: 1.1}, {X: 2, Y: 2}, {X: 2, Y: 2.2}, {X: 3, Y: 3.1}}
	if _, err := Fit(few, Options{Weighting: WeightInvS2}); err == nil || !strings.Contains(err.Error(), "three or more") {
		t.Errorf("1/s² on two replicated levels: %v", err)
	}
}

// TestMinReplicatesForS2: 1/s² is a candidate of auto only when every
// non-zero level has the method's minimum of readings (default 3, common
// practice); a fixed 1/s² with fewer is fitted but flagged.
func TestMinReplicatesForS2(t *testing.T) {
	pts := photometerPoints() // two readings per level
	r := fitOrFatal(t, pts, Options{Weighting: WeightAuto})
	if c := r.WeightCandidates[len(r.WeightCandidates)-1]; c.Weighting != WeightInvS2 || c.Scored {
		t.Errorf("default minimum 3: 1/s² candidate %+v", c)
	}
	r = fitOrFatal(t, pts, Options{Weighting: WeightAuto, Weights: WeightOptions{MinReplicates: 2}})
	if c := r.WeightCandidates[len(r.WeightCandidates)-1]; c.Weighting != WeightInvS2 || !c.Scored {
		t.Errorf("minimum 2: 1/s² candidate %+v", c)
	}
	r = fitOrFatal(t, pts, Options{Weighting: WeightInvS2})
	if !slices.Contains(r.Flags, FitFlagFewReplicates) || !strings.Contains(r.ZeroHandling, "fewer readings than the method's minimum") {
		t.Errorf("fixed 1/s² on duplicates: flags %v, %q", r.Flags, r.ZeroHandling)
	}
	r = fitOrFatal(t, pts, Options{Weighting: WeightInvS2, Weights: WeightOptions{MinReplicates: 2}})
	if slices.Contains(r.Flags, FitFlagFewReplicates) {
		t.Errorf("minimum 2 met, flags %v", r.Flags)
	}
	if _, err := Fit(pts, Options{Weights: WeightOptions{MinReplicates: 1}}); err == nil {
		t.Error("a minimum of 1 reading accepted")
	}
}

// TestSqrtWeightings: the 1/x^0.5 and 1/y^0.5 candidates of Almeida et al.
// (J. Chromatogr. B 774 (2002) 215) weight each reading by 1/√|x| or
// 1/√|y|: the fit equals a fit with those raw weights supplied.
func TestSqrtWeightings(t *testing.T) {
	pts := photometerPoints()
	for _, tc := range []struct {
		w  Weighting
		of func(Point) float64
	}{
		{WeightInvSqrtX, func(p Point) float64 { return 1 / math.Sqrt(p.X) }},
		{WeightInvSqrtY, func(p Point) float64 { return 1 / math.Sqrt(math.Abs(p.Y)) }},
	} {
		t.Run(string(tc.w), func(t *testing.T) {
			raw := make([]float64, len(pts))
			for i, p := range pts {
				raw[i] = tc.of(p)
			}
			want, err := fitWeights(pts, Options{Weighting: tc.w}, raw)
			if err != nil {
				t.Fatal(err)
			}
			got := fitOrFatal(t, pts, Options{Weighting: tc.w})
			for j := range got.Coefficients {
				if !closeTo(got.Coefficients[j], want.Coefficients[j], 1e-13, 0) {
					t.Errorf("coefficient %d: %v, with 1/√ raw weights %v", j, got.Coefficients[j], want.Coefficients[j])
				}
			}
			for i := range got.Points {
				if !closeTo(got.Points[i].Weight, want.Points[i].Weight, 1e-13, 0) {
					t.Errorf("weight %d: %v, want %v", i, got.Points[i].Weight, want.Points[i].Weight)
				}
			}
			p, err := got.Predict([]float64{0.5}, 1, 0)
			if err != nil || !p.Interval.Bounded {
				t.Errorf("predict: %v %+v", err, p)
			}
		})
	}
}

// TestDominantLevelFlag: a fit in which one level holds more than half of
// Σw is flagged (common practice). 1/x² over the photometer's duplicates at
// 0.5 … 100 gives the level at 0.5 the share 4/Σ(1/x²) of Σw [C].
func TestDominantLevelFlag(t *testing.T) {
	r := fitOrFatal(t, photometerPoints(), Options{Weighting: WeightInvX2})
	var sum float64
	for _, x := range []float64{0.5, 1, 2, 5, 10, 20, 50, 100} {
		sum += 1 / (x * x)
	}
	if want := 4 / sum; r.HeaviestLevel.X != 0.5 || !closeTo(r.HeaviestLevel.Share, want, 1e-13, 0) {
		t.Errorf("heaviest level %+v, want x = 0.5 with %v", r.HeaviestLevel, want)
	}
	if !slices.Contains(r.Flags, FitFlagDominantLevel) {
		t.Errorf("flags %v", r.Flags)
	}
	if r = fitOrFatal(t, photometerPoints(), Options{Weighting: WeightInvSqrtX}); len(r.Flags) != 0 {
		t.Errorf("1/x^0.5: flags %v, heaviest %+v", r.Flags, r.HeaviestLevel)
	}
}

// TestFixedWeightingReportsAdvice: a method that fixed its weighting after
// validation still gets auto's table, with the candidate auto would choose
// marked, so a reviewer sees it.
func TestFixedWeightingReportsAdvice(t *testing.T) {
	r := fitOrFatal(t, nitrateDemoPoints(), Options{Weighting: WeightInvX2})
	auto := fitOrFatal(t, nitrateDemoPoints(), Options{Weighting: WeightAuto})
	if r.Weighting != WeightInvX2 || r.WeightingRequested != WeightInvX2 || r.WeightingAdvised != auto.Weighting {
		t.Errorf("used %s, requested %s, advised %s; auto chooses %s", r.Weighting, r.WeightingRequested, r.WeightingAdvised, auto.Weighting)
	}
	if len(r.WeightCandidates) != len(autoCandidates) {
		t.Fatalf("%d candidates", len(r.WeightCandidates))
	}
	for i, c := range r.WeightCandidates {
		if c.Chosen != (c.Weighting == WeightInvX2) || c.Advised != (c.Weighting == auto.Weighting) {
			t.Errorf("candidate %+v", c)
		}
		if a := auto.WeightCandidates[i]; a.SumAbsRE != c.SumAbsRE || a.Advised != c.Advised {
			t.Errorf("candidate %s: %+v with a fixed weighting, %+v with auto", c.Weighting, c, a)
		}
	}
}

// TestLimitSigmaBasis: ICH Q2(R2) lets σ of LOD = 3.3·σ/S be the SD of the
// blank or the residual SD of the regression [M, FIELD-NOTES §4]; with
// weights the SD at the low end is s/√w of a reading there.
func TestLimitSigmaBasis(t *testing.T) {
	pts := photometerPoints()
	t.Run("unweighted: lowest_level_sd is the residual SD", func(t *testing.T) {
		r := fitOrFatal(t, pts, Options{})
		if r.Limits.SigmaBasis != SigmaLowestLevel || r.Limits.Sigma != r.ResidualSD || r.Limits.LOD != 3.3*r.ResidualSD/r.Coefficients[1] {
			t.Errorf("limits %+v, s %v", r.Limits, r.ResidualSD)
		}
	})
	t.Run("1/x²: the SD the weighting implies at the lowest standard", func(t *testing.T) {
		r := fitOrFatal(t, pts, Options{Weighting: WeightInvX2})
		w := r.Points[0].Weight // a reading at 0.5, the lowest standard
		want := r.ResidualSD / math.Sqrt(w)
		if r.Limits.SigmaBasis != SigmaLowestLevel || !closeTo(r.Limits.Sigma, want, 1e-13, 0) ||
			!closeTo(r.Limits.LOQ, 10*want/r.Coefficients[1], 1e-13, 0) {
			t.Errorf("limits %+v, want σ = s/√w = %v", r.Limits, want)
		}
		res := fitOrFatal(t, pts, Options{Weighting: WeightInvX2, Weights: WeightOptions{LimitSigma: SigmaResidual}})
		if res.Limits.SigmaBasis != SigmaResidual || res.Limits.LOD != 3.3*res.ResidualSD/res.Coefficients[1] {
			t.Errorf("residual_sd: %+v", res.Limits)
		}
	})
	blanks := append(append([]Point(nil), pts...),
		Point{Level: "B", X: 0, Y: 0.0121, Excluded: true}, Point{Level: "B", X: 0, Y: 0.0109, Excluded: true},
		Point{Level: "B", X: 0, Y: 0.0117, Excluded: true})
	t.Run("blanks read three times: blank_sd", func(t *testing.T) {
		r := fitOrFatal(t, blanks, Options{Weighting: WeightInvX2})
		m := (0.0121 + 0.0109 + 0.0117) / 3
		sd := math.Sqrt(((0.0121-m)*(0.0121-m) + (0.0109-m)*(0.0109-m) + (0.0117-m)*(0.0117-m)) / 2)
		if r.Limits.SigmaBasis != SigmaBlank || !closeTo(r.Limits.Sigma, sd, 1e-12, 0) ||
			!closeTo(r.Limits.LOD, 3.3*sd/r.Coefficients[1], 1e-12, 0) {
			t.Errorf("limits %+v, blank SD %v", r.Limits, sd)
		}
	})
	t.Run("two blanks: auto falls back, blank_sd uses them", func(t *testing.T) {
		two := blanks[:len(blanks)-1]
		r := fitOrFatal(t, two, Options{Weighting: WeightInvX2})
		if r.Limits.SigmaBasis != SigmaLowestLevel || !strings.Contains(r.Limits.Detail, "not taken from the blank") {
			t.Errorf("auto with two blanks: %+v", r.Limits)
		}
		r = fitOrFatal(t, two, Options{Weighting: WeightInvX2, Weights: WeightOptions{LimitSigma: SigmaBlank}})
		if r.Limits.SigmaBasis != SigmaBlank || !r.Limits.Computed {
			t.Errorf("blank_sd with two blanks: %+v", r.Limits)
		}
	})
	t.Run("blank_sd without blanks: not computed", func(t *testing.T) {
		r := fitOrFatal(t, pts, Options{Weights: WeightOptions{LimitSigma: SigmaBlank}})
		if r.Limits.Computed || r.Limits.LOD != 0 || !strings.Contains(r.Limits.Detail, "blank_sd") {
			t.Errorf("limits %+v", r.Limits)
		}
	})
}
