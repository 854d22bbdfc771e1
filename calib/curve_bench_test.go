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
