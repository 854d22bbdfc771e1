package curveplot

import (
	"math"
	"testing"

	"curvekeeper/calib"
)

func relDiff(got, want float64) float64 {
	if want == 0 {
		return math.Abs(got)
	}
	return math.Abs(got-want) / math.Abs(want)
}

func mustCurve(t *testing.T, r *calib.Report) curve {
	t.Helper()
	c, ok, err := newCurve(r)
	if err != nil || !ok {
		t.Fatalf("newCurve: ok %v, err %v", ok, err)
	}
	if c.cov == nil {
		t.Fatal("newCurve: no band for a report with covariance, df and confidence")
	}
	return c
}

// At x = x̄w the band of a straight line reduces to the hand expansion of
// f(x)ᵀ·Cov·f(x) with f = (1, x̄w).
func TestHalfWidthAtWeightedMean(t *testing.T) {
	r := linearReport(t, sixteenStandards)
	c := mustCurve(t, r)
	xb, cv := r.MeanXW, r.Covariance
	tq, err := tQuantile(r.Confidence, r.DF)
	if err != nil {
		t.Fatal(err)
	}
	want := tq * math.Sqrt(cv[0][0]+2*xb*cv[0][1]+xb*xb*cv[1][1])
	got, ok := c.halfWidth(xb)
	if !ok || relDiff(got, want) > 1e-12 {
		t.Errorf("halfWidth(x̄w = %g) = %.15g (ok %v), want %.15g", xb, got, ok, want)
	}
}

// For the straight line the band from the covariance must equal the
// textbook form t·s·√(1/Σw + (x − x̄w)²/Sxx,w) (Miller & Miller, Statistics
// and Chemometrics for Analytical Chemistry, §5.6 and §5.10, weighted form),
// computed from the Report's SumW, MeanXW, SxxW and ResidualSD. Agreement to
// 1e-12 checks the helper and the consistency of the Report's fields.
func TestHalfWidthMatchesTextbookLinear(t *testing.T) {
	r := linearReport(t, sixteenStandards)
	c := mustCurve(t, r)
	tq, err := tQuantile(r.Confidence, r.DF)
	if err != nil {
		t.Fatal(err)
	}
	for _, x := range []float64{0, 0.5, 3.7, r.MeanXW, 10, 27.5, 50, 52.5} {
		want := tq * r.ResidualSD * math.Sqrt(1/r.SumW+(x-r.MeanXW)*(x-r.MeanXW)/r.SxxW)
		got, ok := c.halfWidth(x)
		if !ok || relDiff(got, want) > 1e-12 {
			t.Errorf("halfWidth(%g) = %.15g (ok %v), textbook %.15g, rel diff %.2g", x, got, ok, want, relDiff(got, want))
		}
	}
}

// Quantiles of Student's t as printed in the NIST/SEMATECH e-Handbook of
// Statistical Methods, table 1.3.6.7.2 (upper critical values, 3 decimals);
// the values are quoted from memory of that table, hence the 5e-4 tolerance.
func TestTQuantile(t *testing.T) {
	tests := []struct {
		conf float64
		df   int
		want float64
	}{
		{0.95, 1, 12.706},
		{0.95, 10, 2.228},
		{0.95, 13, 2.160},
		{0.99, 20, 2.845},
		{0.90, 5, 2.015},
	}
	for _, tt := range tests {
		got, err := tQuantile(tt.conf, tt.df)
		if err != nil || math.Abs(got-tt.want) > 5e-4 {
			t.Errorf("tQuantile(%g, %d) = %.4f, %v; want %.3f", tt.conf, tt.df, got, err, tt.want)
		}
	}
	for _, bad := range []struct {
		conf float64
		df   int
	}{{0, 5}, {1, 5}, {math.NaN(), 5}, {0.95, 0}, {0.95, -2}} {
		if _, err := tQuantile(bad.conf, bad.df); err == nil {
			t.Errorf("tQuantile(%g, %d): no error", bad.conf, bad.df)
		}
	}
}

// The band of the other models, against f(x)ᵀ·Cov·f(x) expanded by hand.
func TestMeanVarianceModels(t *testing.T) {
	cov3 := [][]float64{{0.04, -0.003, 0.00002}, {-0.003, 0.0009, -0.00001}, {0.00002, -0.00001, 0.0000004}}
	tests := []struct {
		name  string
		model calib.Model
		cov   [][]float64
		x     float64
		want  float64
	}{
		{"origin", calib.LinearOrigin, [][]float64{{0.0025}}, 4, 16 * 0.0025},
		{"quadratic", calib.Quadratic, cov3, 7,
			cov3[0][0] + 2*7*cov3[0][1] + 2*49*cov3[0][2] + 49*cov3[1][1] + 2*343*cov3[1][2] + 2401*cov3[2][2]},
		{"linear", calib.Linear, [][]float64{{0.01, -0.002}, {-0.002, 0.0008}}, 3, 0.01 - 2*3*0.002 + 9*0.0008},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := meanVariance(tt.model, tt.cov, tt.x)
			if relDiff(got, tt.want) > 1e-12 {
				t.Errorf("meanVariance(%g) = %.15g, want %.15g", tt.x, got, tt.want)
			}
		})
	}
}

func TestNewCurve(t *testing.T) {
	good := linearReport(t, sixteenStandards)
	tests := []struct {
		name     string
		edit     func(r *calib.Report)
		wantOK   bool
		wantErr  bool
		wantBand bool
	}{
		{"complete", func(*calib.Report) {}, true, false, true},
		{"no coefficients", func(r *calib.Report) { r.Coefficients = nil }, false, false, false},
		{"NaN coefficient", func(r *calib.Report) { r.Coefficients = []float64{math.NaN(), 1} }, false, false, false},
		{"wrong count", func(r *calib.Report) { r.Coefficients = []float64{1, 2, 3} }, false, true, false},
		{"unknown model", func(r *calib.Report) { r.Model = "cubic" }, false, true, false},
		{"no covariance", func(r *calib.Report) { r.Covariance = nil }, true, false, false},
		{"NaN covariance", func(r *calib.Report) { r.Covariance = [][]float64{{1, math.NaN()}, {0, 1}} }, true, false, false},
		{"ragged covariance", func(r *calib.Report) { r.Covariance = [][]float64{{1}, {0, 1}} }, true, false, false},
		{"no df", func(r *calib.Report) { r.DF = 0 }, true, false, false},
		{"no confidence", func(r *calib.Report) { r.Confidence = 0 }, true, false, false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := *good
			r.Coefficients = append([]float64(nil), good.Coefficients...)
			tt.edit(&r)
			c, ok, err := newCurve(&r)
			if ok != tt.wantOK || (err != nil) != tt.wantErr || (c.cov != nil) != tt.wantBand {
				t.Errorf("got ok %v, err %v, band %v; want ok %v, err %v, band %v",
					ok, err, c.cov != nil, tt.wantOK, tt.wantErr, tt.wantBand)
			}
		})
	}
}
