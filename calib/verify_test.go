package calib

import (
	"errors"
	"math"
	"testing"
)

// TestVerifyMillerFluorescence reads verification standards back from the
// Miller & Miller ch. 5 fluorescence line (FIELD-NOTES §7, [M; confirmed C]):
// a response of 13.5 gives x0 = 6.21 and 2.9 gives x0 = 0.72 (textbook, from
// memory). Recovery and %D are then 100·x0/nominal and 100·(x0 − nominal)/
// nominal by their definition (US EPA SW-846 8000D %D, [M]); the expected
// values below are that arithmetic on the textbook x0, checked to the
// rounding of x0 (±0.005 in x0).
func TestVerifyMillerFluorescence(t *testing.T) {
	xs := []float64{0, 2, 4, 6, 8, 10, 12}
	ys := []float64{2.1, 5.0, 9.0, 12.6, 17.3, 21.0, 24.7}
	pts := make([]Point, len(xs))
	for i := range xs {
		pts[i] = Point{X: xs[i], Y: ys[i]}
	}
	rep, err := Fit(pts, Options{Model: Linear, Weighting: WeightNone})
	if err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name                string
		y0, nominal, limit  float64
		wantFound, wantDiff float64
		wantLimit           float64
		wantPassed          bool
	}{
		{"close to nominal", 13.5, 6.0, 0, 6.21, 3.5, 20, true},
		{"24 % high fails the default ±20 %", 13.5, 5.0, 0, 6.21, 24.2, 20, false},
		{"method limit 3 % fails 3.5 %", 13.5, 6.0, 3, 6.21, 3.5, 3, false},
		{"low standard", 2.9, 0.75, 0, 0.72, -4.0, 20, true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := rep.Verify([]float64{tc.y0}, tc.nominal, tc.limit)
			if err != nil {
				t.Fatal(err)
			}
			tolFound := 0.005
			tolPct := 100 * tolFound / tc.nominal
			if !got.HasFound || math.Abs(got.Found-tc.wantFound) > tolFound {
				t.Errorf("found = %v (has %v), want %v ± %v (Miller & Miller ch. 5, from memory)", got.Found, got.HasFound, tc.wantFound, tolFound)
			}
			if math.Abs(got.DifferencePct-tc.wantDiff) > tolPct {
				t.Errorf("%%D = %v, want %v ± %v", got.DifferencePct, tc.wantDiff, tolPct)
			}
			if math.Abs(got.RecoveryPct-(100+tc.wantDiff)) > tolPct {
				t.Errorf("recovery = %v, want %v ± %v", got.RecoveryPct, 100+tc.wantDiff, tolPct)
			}
			if got.LimitPct != tc.wantLimit || got.Passed != tc.wantPassed {
				t.Errorf("limit %v passed %v, want %v %v (%s)", got.LimitPct, got.Passed, tc.wantLimit, tc.wantPassed, got.Detail)
			}
			if len(got.Cautions) == 0 {
				t.Error("a verification without cautions")
			}
		})
	}
}

func TestVerifyRefusesBadInput(t *testing.T) {
	pts := []Point{{X: 1, Y: 1.1}, {X: 2, Y: 2.0}, {X: 3, Y: 3.1}, {X: 4, Y: 3.9}}
	rep, err := Fit(pts, Options{Model: Linear, Weighting: WeightNone, Policy: Policy{MinLevels: 2, MandelAlpha: 0.01,
		LackOfFitAlpha: 0.05, HomoscedasticityAlpha: 0.01, BackCalcTolerancePct: 15, BackCalcLowTolerancePct: 20,
		BackCalcMinPassFraction: 0.75, MinRSquared: 0.99, MaxRSEPct: 20, InterceptAlpha: 0.05, RunsAlpha: 0.05,
		OutlierStudentized: 3, OutlierCooksD: 1}})
	if err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name           string
		responses      []float64
		nominal, limit float64
		wantField      string
	}{
		{"zero nominal", []float64{2}, 0, 0, "concentration"},
		{"NaN nominal", []float64{2}, math.NaN(), 0, "concentration"},
		{"negative limit", []float64{2}, 2, -1, "limit_pct"},
		{"no responses", nil, 2, 0, "responses"},
		{"infinite response", []float64{math.Inf(1)}, 2, 0, "responses[0]"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := rep.Verify(tc.responses, tc.nominal, tc.limit)
			var ie *InputError
			if !errors.As(err, &ie) || ie.Field != tc.wantField {
				t.Fatalf("error = %v, want an InputError on %s", err, tc.wantField)
			}
		})
	}
	failed := FailedReport(pts[:1], Options{Model: Linear, Weighting: WeightNone}, errors.New("one level"))
	if _, err := failed.Verify([]float64{1}, 1, 0); err == nil {
		t.Error("Verify on an unfitted report: no error")
	}
}
