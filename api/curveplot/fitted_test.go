package curveplot

import (
	"math"
	"strings"
	"testing"

	"curvekeeper/calib"
)

func calibPoints(data []standard) []calib.Point {
	pts := make([]calib.Point, len(data))
	for i, s := range data {
		pts[i] = calib.Point{Level: s.level, X: s.x, Y: s.y, Excluded: s.excluded}
	}
	return pts
}

// A report from the engine draws, and its band agrees with the textbook
// form computed from the same report's sufficient statistics (Miller &
// Miller §5.10, weighted form), and its coefficients with the hand-built
// report (gonum stat.LinearRegression).
func TestCurveOfFittedReport(t *testing.T) {
	r, err := calib.Fit(calibPoints(sixteenStandards), calib.Options{Model: calib.Linear, Weighting: calib.WeightInvX})
	if err != nil {
		t.Fatalf("calib.Fit: %v", err)
	}
	hand := linearReport(t, sixteenStandards)
	for i := range hand.Coefficients {
		if relDiff(r.Coefficients[i], hand.Coefficients[i]) > 1e-9 {
			t.Errorf("coefficient %d: engine %.12g, gonum stat.LinearRegression %.12g", i, r.Coefficients[i], hand.Coefficients[i])
		}
	}
	c := mustCurve(t, r)
	tq, err := tQuantile(r.Confidence, r.DF)
	if err != nil {
		t.Fatal(err)
	}
	for _, x := range []float64{0, 0.5, r.MeanXW, 20, 50} {
		want := tq * r.ResidualSD * math.Sqrt(1/r.SumW+(x-r.MeanXW)*(x-r.MeanXW)/r.SxxW)
		got, ok := c.halfWidth(x)
		if !ok || relDiff(got, want) > 1e-12 {
			t.Errorf("halfWidth(%g) = %.15g, textbook %.15g, rel diff %.2g", x, got, want, relDiff(got, want))
		}
	}
	b, err := Curve(r, Options{Analyte: "nitrate", Unit: "ug/L"})
	if err != nil {
		t.Fatalf("Curve: %v", err)
	}
	got := svgText(t, b)
	for _, want := range []string{"Fitted curve, linear", "Standards, excluded", "95% confidence band of the mean"} {
		if !strings.Contains(got, want) {
			t.Errorf("SVG text lacks %q", want)
		}
	}
	if _, err := Curve(r, Options{Format: FormatPNG}); err != nil {
		t.Errorf("Curve PNG: %v", err)
	}
	if alt := AltText(r, "nitrate", "ug/L"); !strings.Contains(alt, "Model linear, weighting 1/x: y = ") {
		t.Errorf("AltText of a fitted report: %s", alt)
	}
}

// The engine's report for readings it cannot fit draws with the note.
func TestCurveOfEngineFailedReport(t *testing.T) {
	pts := []calib.Point{{Level: "L1", X: 5, Y: 0.61}, {Level: "L1", X: 5, Y: 0.60}, {Level: "L1", X: 5, Y: 0.62}}
	opt := calib.Options{Model: calib.Linear}
	_, ferr := calib.Fit(pts, opt)
	if ferr == nil {
		t.Fatal("calib.Fit of one level: no error")
	}
	r := calib.FailedReport(pts, opt, ferr)
	b, err := Curve(r, Options{Unit: "mg/L"})
	if err != nil {
		t.Fatalf("Curve of calib.FailedReport: %v", err)
	}
	if got := svgText(t, b); !strings.Contains(got, NoCurveNote) {
		t.Errorf("SVG text lacks %q", NoCurveNote)
	}
	if alt := AltText(r, "nitrate", "mg/L"); !strings.Contains(alt, "No curve could be fitted.") {
		t.Errorf("AltText of a failed report: %s", alt)
	}
}
