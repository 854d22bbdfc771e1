package curveplot

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

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
	if !c.band {
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

// tQuantile is t(1−α/2; df) for the two-sided level conf = 1−α, straight
// from gonum's Student's t distribution: the reference the band is checked
// against.
func tQuantile(conf float64, df int) (float64, error) {
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(df)}.Quantile(1 - (1-conf)/2), nil
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
			if ok != tt.wantOK || (err != nil) != tt.wantErr || c.band != tt.wantBand {
				t.Errorf("got ok %v, err %v, band %v; want ok %v, err %v, band %v",
					ok, err, c.band, tt.wantOK, tt.wantErr, tt.wantBand)
			}
		})
	}
}
