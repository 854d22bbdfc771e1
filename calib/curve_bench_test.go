package calib

import "testing"

// BenchmarkFit4PL: a 16-reading, 8-level 1/y² weighted 4PL (elisaCurve)
// fitted from self-starting values, with one inverse prediction of a
// duplicate. Compare with testdata/gen/bench_scipy_4pl.py, which times
// scipy's curve_fit of the same data (fit only) in the same session.
func BenchmarkFit4PL(b *testing.B) {
	x, y, w := elisaCurve()
	b.ReportAllocs()
	for b.Loop() {
		f, err := FitCurve(x, y, w, CurveOptions{Model: FourPL})
		if err != nil || f.Outcome != Converged {
			b.Fatal(err, f.Outcome)
		}
		if _, err := f.Predict([]float64{1.0, 1.05}, 1, 1, 0); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkFullReport4PL: the full report of a 1/y²-weighted 4PL on the 16
// readings of elisaCurve through Fit (self-start, every check, the
// precision profile) and one inverse prediction of a duplicate with its
// band-inversion interval. The harness's fit_4pl line compares it with
// testdata/gen/bench_scipy_4pl.py (scipy's bare curve_fit of the same
// data and weights) run side by side.
func BenchmarkFullReport4PL(b *testing.B) {
	pts := elisaPoints()
	b.ReportAllocs()
	for b.Loop() {
		r, err := Fit(pts, Options{Model: FourPL, Weighting: WeightInvY2})
		if err != nil || r.Curve.Outcome != "converged" {
			b.Fatal(err)
		}
		if _, err := r.Predict([]float64{1.0, 1.05}, 1, 0); err != nil {
			b.Fatal(err)
		}
	}
}
