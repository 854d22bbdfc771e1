package calib

import (
	"encoding/json"
	"math"
	"testing"
)

// TestAverageRFReportByHand fits the average RF model through Fit and
// checks it against a worked example computed by hand:
//
//	x: 0 (blank), 1, 2, 5, 10, 20, 50;  y: 0.02, 1.0, 2.2, 4.5, 10.5, 19, 50
//	RF_i = y/x = 1.00, 1.10, 0.90, 1.05, 0.95, 1.00;  RF̄ = 6/6 = 1
//	deviations 0, .1, −.1, .05, −.05, 0: Σ² = 0.025; s² = 0.025/5 = 0.005
//	s_RF = 0.0707106781;  %RSD = 7.07106781 % ≤ 20 %
//	unknown y0 = 7.5 (one reading): x̂0 = 7.5/1 = 7.5
//	u(x̂0) = 7.5·0.0707106781·√(1 + 1/6) = 0.5728219619
//	t(0.975, 5) = 2.5705818366 (any t table); half = t·s·√(7/6) = 0.19633143
//	interval 7.5/(1 + half) = 6.2691657, 7.5/(1 − half) = 9.3322052
func TestAverageRFReportByHand(t *testing.T) {
	xs := []float64{0, 1, 2, 5, 10, 20, 50}
	ys := []float64{0.02, 1.0, 2.2, 4.5, 10.5, 19, 50}
	var pts []Point
	for i := range xs {
		pts = append(pts, Point{Level: "L" + itoa(i), X: xs[i], Y: ys[i]})
	}
	r, err := Fit(pts, Options{Model: AverageRF})
	if err != nil {
		t.Fatal(err)
	}
	near := func(what string, got, want, tol float64) {
		t.Helper()
		if math.Abs(got-want) > tol {
			t.Errorf("%s = %.12g, want %.12g (worked by hand)", what, got, want)
		}
	}
	if r.Model != AverageRF || r.RF == nil || r.RF.K != 6 || r.RF.Blanks != 1 || len(r.Coefficients) != 1 {
		t.Fatalf("model %s, rf %+v, coefficients %v", r.Model, r.RF, r.Coefficients)
	}
	near("RF̄", r.RF.Mean, 1, 1e-14)
	near("coefficient", r.Coefficients[0], 1, 1e-14)
	near("s_RF", r.RF.SD, math.Sqrt(0.005), 1e-14)
	near("%RSD", r.RF.RSDPct, 7.07106781187, 1e-9)
	// The weighted residual SD of the origin line with weights 1/x² is s_RF
	// (weights normalised to Σw = n scale both sides alike).
	near("residual SD ÷ √(w at x=1)", r.ResidualSD*r.WeightFloor/math.Sqrt(r.WeightScale), r.RF.SD, 1e-12)
	var rsd *Check
	for i := range r.Checks {
		if r.Checks[i].Name == CheckRFRSD {
			rsd = &r.Checks[i]
		}
	}
	if rsd == nil || !rsd.Computed || !rsd.Passed || !rsd.Mandatory || rsd.Limit != 20 {
		t.Fatalf("rf_rsd check %+v: want computed, passed, mandatory, limit 20", rsd)
	}
	p, err := r.Predict([]float64{7.5}, 1, 0)
	if err != nil {
		t.Fatal(err)
	}
	near("x̂0", p.Concentration, 7.5, 1e-13)
	near("u(x̂0)", p.StandardError, 0.5728219619, 1e-9)
	near("low", p.Interval.Low, 6.2691657, 1e-6)
	near("high", p.Interval.High, 9.3322052, 1e-6)
	if p.Method != "average_rf_t_pivot" || !p.Interval.Bounded {
		t.Errorf("method %q bounded %v", p.Method, p.Interval.Bounded)
	}
	// The stand-alone model gives the same numbers.
	m, err := FitAverageRF([]RFPoint{{"L1", 1, 1, 0, 0}, {"L2", 2, 2.2, 0, 0}, {"L3", 5, 4.5, 0, 0}, {"L4", 10, 10.5, 0, 0}, {"L5", 20, 19, 0, 0}, {"L6", 50, 50, 0, 0}}, RFOptions{})
	if err != nil {
		t.Fatal(err)
	}
	mp, _ := m.Predict([]float64{7.5}, nil, 0, 1)
	near("RFModel u(x̂0)", mp.StandardError, p.StandardError, 1e-12)
	near("RFModel low", mp.Interval.Low, p.Interval.Low, 1e-12)
	// A stored and reloaded report predicts the same.
	b, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	var back Report
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	p2, err := back.Predict([]float64{7.5}, 1, 0)
	if err != nil || p2.StandardError != p.StandardError || p2.Concentration != p.Concentration {
		t.Errorf("reloaded report predicts %+v, %v", p2, err)
	}
	// A limit of 7 % fails these RFs and so the verdict (rf_rsd is mandatory).
	pol := DefaultPolicy()
	pol.MaxRFRSDPct = 7
	r7, err := Fit(pts, Options{Model: AverageRF, Policy: pol})
	if err != nil {
		t.Fatal(err)
	}
	if r7.Verdict != "fail" {
		t.Errorf("verdict %s with %%RSD 7.07 against 7 %%", r7.Verdict)
	}
}
