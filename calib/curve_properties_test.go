package calib

import (
	"errors"
	"math"
	"slices"
	"testing"
)

// elisaCurve is an invented immunoassay calibration (the 4PL case of
// testdata/gen/make_golden_curves.py): 8 calibrators in duplicate, rising,
// with 1/y² weights.
func elisaCurve() (x, y, w []float64) {
	x = []float64{0.5, 0.5, 1, 1, 2.5, 2.5, 5, 5, 10, 10, 25, 25, 50, 50, 100, 100}
	y = []float64{0.081, 0.077, 0.118, 0.124, 0.236, 0.229, 0.432, 0.447,
		0.806, 0.781, 1.542, 1.571, 2.118, 2.071, 2.452, 2.497}
	w = make([]float64, len(y))
	for i, v := range y {
		w[i] = 1 / (v * v)
	}
	return x, y, w
}

func fitCurveOrFatal(t testing.TB, x, y, w []float64, opt CurveOptions) *CurveFit {
	t.Helper()
	f, err := FitCurve(x, y, w, opt)
	if err != nil {
		t.Fatal(err)
	}
	if f.Outcome != Converged {
		t.Fatalf("%s: outcome %s (%s)", opt.Model, f.Outcome, f.Criterion)
	}
	return f
}

// TestCurvePermutationInvariance: shuffling the readings changes neither
// the coefficients nor the prediction beyond the solver's stopping point.
// Summation order changes the iterates' path, and the convergence
// criteria stop it within a small fraction of a standard error of the
// minimum: required |Δβ| ≤ 1e-8·|β| + 1e-5·SE(β), SEs and x̂0 to 1e-5
// (the ill-conditioned 5PL shows 5e-7 relative on c, 6e-7 of its SE).
func TestCurvePermutationInvariance(t *testing.T) {
	x, y, w := elisaCurve()
	perm := []int{15, 3, 8, 0, 12, 6, 1, 14, 9, 4, 11, 7, 2, 13, 10, 5}
	px, py, pw := make([]float64, 16), make([]float64, 16), make([]float64, 16)
	for i, j := range perm {
		px[i], py[i], pw[i] = x[j], y[j], w[j]
	}
	for _, m := range []Model{FourPL, FivePL} {
		a := fitCurveOrFatal(t, x, y, w, CurveOptions{Model: m})
		b := fitCurveOrFatal(t, px, py, pw, CurveOptions{Model: m})
		for j := range a.Coefficients {
			if !closeTo(a.Coefficients[j], b.Coefficients[j], 1e-8, 1e-5*a.StandardErrors[j]) || !closeTo(a.StandardErrors[j], b.StandardErrors[j], 1e-5, 0) {
				t.Errorf("%s coefficient %d: %v ± %v vs permuted %v ± %v", m, j, a.Coefficients[j], a.StandardErrors[j], b.Coefficients[j], b.StandardErrors[j])
			}
		}
		pa, _ := a.Predict([]float64{1.0}, 1, 1, 0)
		pb, _ := b.Predict([]float64{1.0}, 1, 1, 0)
		if !closeTo(pa.Concentration, pb.Concentration, 1e-5, 0) || !closeTo(pa.Interval.High, pb.Interval.High, 1e-5, 0) {
			t.Errorf("%s prediction %+v vs permuted %+v", m, pa, pb)
		}
	}
}

// TestCurveConcentrationScaling: the 4PL in log x is equivariant in
// concentration units: x → k·x scales c and x̂0 (and its interval) by k and
// leaves a, b, d and s unchanged.
func TestCurveConcentrationScaling(t *testing.T) {
	x, y, w := elisaCurve()
	a := fitCurveOrFatal(t, x, y, w, CurveOptions{Model: FourPL})
	pa, err := a.Predict([]float64{1.2, 1.25}, 1, 1, 0)
	if err != nil {
		t.Fatal(err)
	}
	for _, k := range []float64{1e-3, 7, 1e4} {
		kx := make([]float64, len(x))
		for i := range x {
			kx[i] = k * x[i]
		}
		b := fitCurveOrFatal(t, kx, y, w, CurveOptions{Model: FourPL})
		for j, want := range []float64{a.Coefficients[0], a.Coefficients[1], k * a.Coefficients[2], a.Coefficients[3]} {
			if !closeTo(b.Coefficients[j], want, 1e-7, 0) {
				t.Errorf("k=%g coefficient %d: %v, want %v", k, j, b.Coefficients[j], want)
			}
		}
		if !closeTo(b.ResidualSD, a.ResidualSD, 1e-7, 0) {
			t.Errorf("k=%g: s %v, want %v", k, b.ResidualSD, a.ResidualSD)
		}
		pb, err := b.Predict([]float64{1.2, 1.25}, 1, 1, 0)
		if err != nil {
			t.Fatal(err)
		}
		if !closeTo(pb.Concentration, k*pa.Concentration, 1e-7, 0) ||
			!closeTo(pb.Interval.Low, k*pa.Interval.Low, 1e-6, 0) || !closeTo(pb.Interval.High, k*pa.Interval.High, 1e-6, 0) {
			t.Errorf("k=%g: x̂0 %v [%v, %v], want k× %v [%v, %v]", k, pb.Concentration, pb.Interval.Low, pb.Interval.High,
				pa.Concentration, pa.Interval.Low, pa.Interval.High)
		}
	}
}

// TestFivePLWithUnitAsymmetryIsFourPL: the 5PL with g fixed to 1 is the
// 4PL (Gottschalk & Dunn 2005): same coefficients, covariance, s, df and
// predictions, though solved through a different parameter count. Each
// solve stops on its own criteria near the same minimum (the relative
// reduction in SS below 1e-12 leaves a coefficient within about 1e-6 of
// its SE), so coefficients and x̂0 are required within 1e-8 relative +
// 1e-5 of their SE, as in the permutation test.
func TestFivePLWithUnitAsymmetryIsFourPL(t *testing.T) {
	x, y, w := elisaCurve()
	four := fitCurveOrFatal(t, x, y, w, CurveOptions{Model: FourPL})
	nan := math.NaN()
	five := fitCurveOrFatal(t, x, y, w, CurveOptions{Model: FivePL, Fixed: []float64{nan, nan, nan, nan, 1}})
	if five.DF != four.DF || five.Coefficients[4] != 1 || five.StandardErrors[4] != 0 {
		t.Fatalf("5PL g=1: df %d (4PL %d), g %v ± %v", five.DF, four.DF, five.Coefficients[4], five.StandardErrors[4])
	}
	for j := 0; j < 4; j++ {
		if !closeTo(five.Coefficients[j], four.Coefficients[j], 1e-8, 1e-5*four.StandardErrors[j]) {
			t.Errorf("coefficient %d: 5PL %v, 4PL %v", j, five.Coefficients[j], four.Coefficients[j])
		}
		for k := 0; k < 4; k++ {
			if !closeTo(five.Covariance[j][k], four.Covariance[j][k], 1e-6, 0) {
				t.Errorf("covariance %d,%d: 5PL %v, 4PL %v", j, k, five.Covariance[j][k], four.Covariance[j][k])
			}
		}
	}
	p4, _ := four.Predict([]float64{0.5}, 1, 1, 0)
	p5, _ := five.Predict([]float64{0.5}, 1, 1, 0)
	if !closeTo(p5.Concentration, p4.Concentration, 1e-8, 1e-5*p4.StandardError) || !closeTo(p5.StandardError, p4.StandardError, 1e-6, 0) {
		t.Errorf("prediction: 5PL %v ± %v, 4PL %v ± %v", p5.Concentration, p5.StandardError, p4.Concentration, p4.StandardError)
	}
}

// TestCurveFixedBlankAndFlags: a 4PL with a fixed to the blank's response
// holds it (and gains a degree of freedom); responses beyond the
// asymptotes get a flag and no number; a response above the top standard
// is flagged as extrapolated.
func TestCurveFixedBlankAndFlags(t *testing.T) {
	x, y, w := elisaCurve()
	nan := math.NaN()
	f := fitCurveOrFatal(t, x, y, w, CurveOptions{Model: FourPL, Fixed: []float64{0.05, nan, nan, nan}})
	if f.Coefficients[0] != 0.05 || f.DF != len(x)-3 || !f.Fixed[0] {
		t.Fatalf("a %v, df %d, fixed %v", f.Coefficients[0], f.DF, f.Fixed)
	}
	d := f.Coefficients[3]
	tests := []struct {
		y     float64
		flags []string
	}{
		{0.01, []string{FlagBelowAsymptote, FlagUnbounded}},
		{d + 0.1, []string{FlagAboveAsymptote, FlagUnbounded}},
		{0.06, []string{FlagBelowRange, FlagExtrapolated}},
		{1.0, nil},
	}
	for _, tc := range tests {
		p, err := f.Predict([]float64{tc.y}, 1, 1, 0)
		if err != nil {
			t.Fatal(err)
		}
		if len(p.Flags) != len(tc.flags) {
			t.Errorf("y=%v: flags %v, want %v", tc.y, p.Flags, tc.flags)
			continue
		}
		for i := range tc.flags {
			if p.Flags[i] != tc.flags[i] {
				t.Errorf("y=%v: flags %v, want %v", tc.y, p.Flags, tc.flags)
			}
		}
		assertFinite(t, p)
		if tc.flags == nil && !(p.Interval.Bounded && p.Interval.Low < p.Concentration && p.Concentration < p.Interval.High) {
			t.Errorf("y=%v: interval %+v around %v", tc.y, p.Interval, p.Concentration)
		}
	}
}

// TestCurveInverseRoundTrip: for every model, the inverse of the fitted
// curve at a concentration inside the range returns that concentration.
func TestCurveInverseRoundTrip(t *testing.T) {
	for _, m := range []Model{FourPL, FivePL, Power, ExpSaturation, ExpSaturationOffset} {
		c := curveOf(m)
		beta := map[Model][]float64{
			FourPL: {0.05, 1.2, 20, 2.9}, FivePL: {2.1, 0.9, 5, 0.1, 2.5}, Power: {3, 0.85},
			ExpSaturation: {10, 0.2}, ExpSaturationOffset: {10, 0.2, 0.05},
		}[m]
		for _, x := range []float64{0.01, 0.7, 3, 40, 90} {
			y := c.Eval(x, beta, nil)
			got, flag, ok := c.invert(y, beta)
			if !ok || !closeTo(got, x, 1e-9, 0) {
				t.Errorf("%s x=%v: inverse %v (%q, %v)", m, x, got, flag, ok)
			}
		}
	}
}

// TestCurvePredictionOverflowRefused: a response whose concentration is
// finite but whose diluted concentration is not (a power curve read far
// above its calibrators, diluted 1e306-fold) is refused as an input
// error, as for the lines, by both the fit's and the report's Predict,
// never returned as +Inf.
func TestCurvePredictionOverflowRefused(t *testing.T) {
	x, y, w := elisaCurve()
	fit := fitCurveOrFatal(t, x, y, w, CurveOptions{Model: Power})
	var ie *InputError
	if p, err := fit.Predict([]float64{1e3}, 1, 1e306, 0); !errors.As(err, &ie) {
		t.Errorf("fit: %+v, %v", p, err)
	}
	r, err := Fit(elisaPoints(), Options{Model: Power, Weighting: WeightInvY2})
	if err != nil {
		t.Fatal(err)
	}
	if p, err := r.Predict([]float64{1e3}, 1e306, 0); !errors.As(err, &ie) {
		t.Errorf("report: %+v, %v", p, err)
	}
	// The same response undiluted is a number, flagged above the range.
	if p, err := r.Predict([]float64{1e3}, 1, 0); err != nil || !Finite(p.Concentration) || !slices.Contains(p.Flags, FlagAboveRange) {
		t.Errorf("undiluted: %+v, %v", p, err)
	}
}
