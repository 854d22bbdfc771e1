package calib

import "testing"

// BenchmarkFullReport: a 16-reading, 8-level 1/x² weighted linear fit with
// every check and limit, and one inverse prediction (the work of one
// calibration run in the service). Compare with
// testdata/gen/bench_statsmodels.py, which times statsmodels' bare WLS fit
// of the same data.
func BenchmarkFullReport(b *testing.B) {
	pts := photometerPoints()
	opt := Options{Model: Linear, Weighting: WeightInvX2}
	b.ReportAllocs()
	for b.Loop() {
		r, err := Fit(pts, opt)
		if err != nil {
			b.Fatal(err)
		}
		if _, err := r.Predict([]float64{0.5, 0.52}, 1, 0); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkSolveLSQ is the bare weighted QR solve of the same data, the part
// comparable to statsmodels' WLS fit.
func BenchmarkSolveLSQ(b *testing.B) {
	pts := photometerPoints()
	x := make([]float64, len(pts))
	y := make([]float64, len(pts))
	w := make([]float64, len(pts))
	for i, p := range pts {
		x[i], y[i], w[i] = p.X, p.Y, 1/(p.X*p.X)
	}
	normalise(w)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := solveLSQ(Linear, x, y, w); err != nil {
			b.Fatal(err)
		}
	}
}
