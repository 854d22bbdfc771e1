package calib

import (
	"math"
	"testing"
)

// photometerPoints is an invented nitrate calibration on an invented
// photometer: 8 levels (0.5–100 mg/L) in duplicate, response ≈ 0.012 +
// 0.0481·x with a relative scatter of about 2 %, so 1/x² weighting suits it.
func photometerPoints() []Point {
	levels := []float64{0.5, 1, 2, 5, 10, 20, 50, 100}
	noise := []float64{0.021, -0.018, 0.012, -0.025, 0.008, -0.011, 0.017, -0.006,
		-0.014, 0.019, 0.009, -0.022, 0.013, -0.010, -0.016, 0.015}
	pts := make([]Point, 0, 16)
	for i, x := range levels {
		for r := 0; r < 2; r++ {
			y := (0.012 + 0.0481*x) * (1 + noise[2*i+r])
			pts = append(pts, Point{Level: "L" + itoa(i+1), X: x, Y: y})
		}
	}
	return pts
}

// curvedPoints is an invented detector that saturates slightly: 7 levels in
// duplicate, y ≈ 0.05 + 1.2x − 0.004x² with small scatter.
func curvedPoints() []Point {
	levels := []float64{1, 5, 10, 20, 40, 60, 80}
	noise := []float64{0.03, -0.02, -0.05, 0.04, 0.08, -0.06, -0.1, 0.12, 0.15, -0.2, -0.18, 0.25, 0.2, -0.22}
	pts := make([]Point, 0, 14)
	for i, x := range levels {
		for r := 0; r < 2; r++ {
			y := 0.05 + 1.2*x - 0.004*x*x + noise[2*i+r]
			pts = append(pts, Point{Level: "C" + itoa(i+1), X: x, Y: y})
		}
	}
	return pts
}

// close reports whether a and b agree to a relative tolerance rel, with an
// absolute floor abs for values near zero.
func closeTo(a, b, rel, abs float64) bool {
	return math.Abs(a-b) <= rel*math.Max(math.Abs(a), math.Abs(b))+abs
}

// fitOrFatal fits or stops the test.
func fitOrFatal(t testing.TB, pts []Point, opt Options) *Report {
	t.Helper()
	r, err := Fit(pts, opt)
	if err != nil {
		t.Fatalf("Fit(%v): %v", opt, err)
	}
	return r
}
