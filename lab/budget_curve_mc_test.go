package lab_test

import (
	"math"
	"strings"
	"testing"

	"curvekeeper/calib"
	"curvekeeper/lab"
)

// TestCurveResultNearAsymptoteReportsMonteCarlo: a 4PL (invented
// immunoassay, 8 levels in duplicate, 1/y²) under a bottom-up spec with the
// default automatic Monte Carlo. Mid-curve the GUM screen leaves the result
// alone; near the upper asymptote it screens it, the Monte Carlo check
// (JCGM 101, drawn curves inverted) does not validate y ± U and the result
// reports the skewed Monte Carlo interval, close to the band-inversion
// interval of the prediction; at the asymptote, where the band does not
// close, no interval is reported and a note says so.
func TestCurveResultNearAsymptoteReportsMonteCarlo(t *testing.T) {
	x := []float64{0.5, 1, 2.5, 5, 10, 25, 50, 100}
	y := [][2]float64{{0.081, 0.077}, {0.118, 0.124}, {0.236, 0.229}, {0.432, 0.447}, {0.806, 0.781}, {1.542, 1.571}, {2.118, 2.071}, {2.452, 2.497}}
	var pts []calib.Point
	for i := range x {
		for _, v := range y[i] {
			pts = append(pts, calib.Point{Level: "C" + string(rune('1'+i)), X: x[i], Y: v})
		}
	}
	rep, err := calib.Fit(pts, calib.Options{Model: calib.FourPL, Weighting: calib.WeightInvY2})
	if err != nil {
		t.Fatal(err)
	}
	bc := lab.BudgetContext{Spec: &lab.UncertaintySpec{}, Unit: "pg/mL"}
	record := func(resp float64) (*lab.BudgetRecord, calib.Prediction) {
		r := []float64{resp * 0.99, resp * 1.01}
		pr, err := rep.Predict(r, 1, 0)
		if err != nil {
			t.Fatal(err)
		}
		rec, err := lab.ResultBudget(rep, pr, r, 1, bc)
		if err != nil {
			t.Fatal(err)
		}
		return rec, pr
	}
	if rec, _ := record(0.8); rec.MonteCarlo != nil {
		t.Errorf("mid-curve: the screen ran Monte Carlo: %+v", rec.MonteCarlo)
	}
	rec, pr := record(2.6)
	ri := rec.ReportedInterval
	if rec.MonteCarlo == nil || rec.MonteCarlo.Trigger != lab.MCTriggerScreened || ri == nil || ri.Method != lab.ReportedMonteCarlo {
		t.Fatalf("near the asymptote: Monte Carlo %+v, reported %+v", rec.MonteCarlo, ri)
	}
	if math.Abs(ri.Low/pr.Interval.Low-1) > 0.05 || math.Abs(ri.High/pr.Interval.High-1) > 0.05 {
		t.Errorf("near the asymptote: reported [%v, %v], band inversion [%v, %v]", ri.Low, ri.High, pr.Interval.Low, pr.Interval.High)
	}
	rec, pr = record(2.85)
	if !pr.Interval.HighOpen || rec.MonteCarlo == nil || rec.ReportedInterval != nil || rec.MonteCarlo.Agrees {
		t.Errorf("at the asymptote: band %+v, Monte Carlo %+v, reported %+v", pr.Interval, rec.MonteCarlo, rec.ReportedInterval)
	}
	found := false
	for _, n := range rec.Notes {
		found = found || strings.Contains(n, "no coverage interval can be stated")
	}
	if !found {
		t.Errorf("at the asymptote: no note says the interval is unbounded: %q", rec.Notes)
	}
}
