package calib

import (
	"math"
	"testing"
)

// sameReport compares every number of two reports; idx maps a point of a to
// its position in b.
func sameReport(t *testing.T, a, b *Report, idx []int, rel float64) {
	t.Helper()
	cmp := func(what string, x, y float64) {
		t.Helper()
		if !closeTo(x, y, rel, 1e-13) {
			t.Errorf("%s: %.17g vs %.17g", what, x, y)
		}
	}
	for j := range a.Coefficients {
		cmp("coefficient", a.Coefficients[j], b.Coefficients[j])
		cmp("SE", a.StandardErrors[j], b.StandardErrors[j])
		for k := range a.Covariance[j] {
			cmp("covariance", a.Covariance[j][k], b.Covariance[j][k])
		}
	}
	cmp("residual SD", a.ResidualSD, b.ResidualSD)
	cmp("R²", a.RSquared, b.RSquared)
	cmp("SumW", a.SumW, b.SumW)
	cmp("SxxW", a.SxxW, b.SxxW)
	cmp("LOD", a.Limits.LOD, b.Limits.LOD)
	cmp("x_c", a.Limits.CriticalConc, b.Limits.CriticalConc)
	for i := range a.Checks {
		cmp(a.Checks[i].Name, a.Checks[i].Statistic, b.Checks[i].Statistic)
		if a.Checks[i].Passed != b.Checks[i].Passed {
			t.Errorf("%s: passed %v vs %v", a.Checks[i].Name, a.Checks[i].Passed, b.Checks[i].Passed)
		}
	}
	for i, j := range idx {
		p, q := a.Points[i], b.Points[j]
		cmp("weight", p.Weight, q.Weight)
		cmp("fitted", p.Fitted, q.Fitted)
		cmp("leverage", p.Leverage, q.Leverage)
		cmp("studentised", p.Studentized, q.Studentized)
		cmp("Cook's D", p.CooksDistance, q.CooksDistance)
		cmp("back-calculated", p.BackCalculated, q.BackCalculated)
	}
	if a.Verdict != b.Verdict {
		t.Errorf("verdict %s vs %s", a.Verdict, b.Verdict)
	}
}

// samePrediction compares two predictions, b expected to be k times a.
func samePrediction(t *testing.T, a, b Prediction, k, rel float64) {
	t.Helper()
	for _, c := range [][2]float64{
		{a.Concentration, b.Concentration}, {a.StandardError, b.StandardError},
		{a.Interval.Low, b.Interval.Low}, {a.Interval.High, b.Interval.High},
	} {
		if !closeTo(k*c[0], c[1], rel, 1e-13) {
			t.Errorf("prediction: %.17g·%v vs %.17g", c[0], k, c[1])
		}
	}
	if a.Interval.Bounded != b.Interval.Bounded || len(a.Flags) != len(b.Flags) {
		t.Errorf("prediction flags %v/%v vs %v/%v", a.Interval.Bounded, a.Flags, b.Interval.Bounded, b.Flags)
	}
}

var propertyCases = []struct {
	name string
	pts  func() []Point
	opt  Options
}{
	{"linear none", photometerPoints, Options{Model: Linear, Weighting: WeightNone}},
	{"linear 1/x^2", photometerPoints, Options{Model: Linear, Weighting: WeightInvX2}},
	{"linear 1/y", photometerPoints, Options{Model: Linear, Weighting: WeightInvY}},
	{"linear 1/s^2", photometerPoints, Options{Model: Linear, Weighting: WeightInvS2}},
	{"origin 1/x", photometerPoints, Options{Model: LinearOrigin, Weighting: WeightInvX}},
	{"quadratic none", curvedPoints, Options{Model: Quadratic, Weighting: WeightNone}},
	{"quadratic 1/x", curvedPoints, Options{Model: Quadratic, Weighting: WeightInvX}},
}

// TestPermutationInvariance: the order of the readings changes no number
// (property of least squares; tolerance for rounding only).
func TestPermutationInvariance(t *testing.T) {
	for _, tc := range propertyCases {
		t.Run(tc.name, func(t *testing.T) {
			pts := tc.pts()
			n := len(pts)
			idx := make([]int, n) // point i of pts goes to position idx[i]
			perm := make([]Point, n)
			for i := range pts {
				idx[i] = (7*i + 3) % n
				if n%7 == 0 {
					idx[i] = n - 1 - i
				}
				perm[idx[i]] = pts[i]
			}
			a := fitOrFatal(t, pts, tc.opt)
			b := fitOrFatal(t, perm, tc.opt)
			sameReport(t, a, b, idx, 1e-11)
			pa, _ := a.Predict([]float64{1.3, 1.35}, 1, 0)
			pb, _ := b.Predict([]float64{1.35, 1.3}, 1, 0)
			samePrediction(t, pa, pb, 1, 1e-11)
		})
	}
}

// TestWeightScaleInvariance: multiplying every raw weight by c changes
// nothing once weights are normalised to Σw = n; without normalisation only
// s(y/x) changes, by √c (Miller & Miller §5.10: why the convention matters).
func TestWeightScaleInvariance(t *testing.T) {
	for _, tc := range propertyCases {
		t.Run(tc.name, func(t *testing.T) {
			opt, err := resolveOptions(tc.opt)
			if err != nil {
				t.Fatal(err)
			}
			pts := tc.pts()
			d, err := prepare(pts, opt.Model)
			if err != nil {
				t.Fatal(err)
			}
			_, raw, err := planWeights(opt.Weighting, d, opt.Weights.MinReplicates)
			if err != nil {
				t.Fatal(err)
			}
			ref := fitOrFatal(t, pts, tc.opt)
			idx := make([]int, len(pts))
			for i := range idx {
				idx[i] = i
			}
			pref, err := ref.Predict([]float64{2.0}, 2, 0.9)
			if err != nil {
				t.Fatal(err)
			}
			for _, c := range []float64{1e-6, 3, 1e8} {
				scaled := make([]float64, len(raw))
				for i := range raw {
					scaled[i] = c * raw[i]
				}
				got, err := fitWeights(pts, tc.opt, scaled)
				if err != nil {
					t.Fatal(err)
				}
				sameReport(t, ref, got, idx, 1e-11)
				pgot, err := got.Predict([]float64{2.0}, 2, 0.9)
				if err != nil {
					t.Fatal(err)
				}
				samePrediction(t, pref, pgot, 1, 1e-11)

				a, err := solveLSQ(opt.Model, d.x, d.y, raw)
				if err != nil {
					t.Fatal(err)
				}
				b, err := solveLSQ(opt.Model, d.x, d.y, scaled)
				if err != nil {
					t.Fatal(err)
				}
				if got, want := b.s, a.s*math.Sqrt(c); !closeTo(got, want, 1e-11, 0) {
					t.Errorf("unnormalised s: got %v, want √%v·%v = %v", got, c, a.s, want)
				}
				for j := range a.beta {
					if !closeTo(a.beta[j], b.beta[j], 1e-11, 1e-15) {
						t.Errorf("unnormalised β%d: %v vs %v", j, a.beta[j], b.beta[j])
					}
				}
			}
		})
	}
}

// TestConcentrationScaling: expressing every concentration in units k times
// smaller scales x̂0, its SE and its interval by k and leaves the verdict
// alone (the weights of x-based schemes scale uniformly and cancel).
func TestConcentrationScaling(t *testing.T) {
	for _, tc := range propertyCases {
		t.Run(tc.name, func(t *testing.T) {
			const k = 1000
			pts := tc.pts()
			scaled := make([]Point, len(pts))
			for i, p := range pts {
				scaled[i] = p
				scaled[i].X = k * p.X
			}
			a := fitOrFatal(t, pts, tc.opt)
			b := fitOrFatal(t, scaled, tc.opt)
			if a.Verdict != b.Verdict {
				t.Errorf("verdict %s vs %s", a.Verdict, b.Verdict)
			}
			for _, ys := range [][]float64{{0.5}, {2.0, 2.1, 1.9}, {30}} {
				pa, err := a.Predict(ys, 1, 0)
				if err != nil {
					t.Fatal(err)
				}
				pb, err := b.Predict(ys, 1, 0)
				if err != nil {
					t.Fatal(err)
				}
				samePrediction(t, pa, pb, k, 1e-9)
			}
		})
	}
}
