package calib

import (
	"math"
	"testing"
)

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
		model Model
		cov   [][]float64
		x     float64
		want  float64
	}{
		{"origin", LinearOrigin, [][]float64{{0.0025}}, 4, 16 * 0.0025},
		{"quadratic", Quadratic, cov3, 7,
			cov3[0][0] + 2*7*cov3[0][1] + 2*49*cov3[0][2] + 49*cov3[1][1] + 2*343*cov3[1][2] + 2401*cov3[2][2]},
		{"linear", Linear, [][]float64{{0.01, -0.002}, {-0.002, 0.0008}}, 3, 0.01 - 2*3*0.002 + 9*0.0008},
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

func relDiff(got, want float64) float64 {
	if want == 0 {
		return math.Abs(got)
	}
	return math.Abs(got-want) / math.Abs(want)
}

// TestBandEdgesPaths drives the band-edge search (bandEdges) with gaps
// whose crossings are known, through each of its paths: a crossing found
// by the walk and refined; a band still open at the walk's lower limit
// that closes between 0 and that limit (the check at x = 0, halving, then
// refinement); a band open to 0 below and to +Inf above; and a first probe
// (the delta-method end, rel) far inside or far outside the edge. Each
// edge must be found to the search's 1e-13 in ln x.
func TestBandEdgesPaths(t *testing.T) {
	r := &Report{Range: Range{Low: 1, High: 10}}
	gapX := func(f func(x float64) float64) func(float64) float64 {
		return func(u float64) float64 { return f(math.Exp(u)) }
	}
	cases := []struct {
		name         string
		f            func(x float64) float64
		x0, rel      float64
		wantLo, want float64
	}{
		{"both edges by the walk", func(x float64) float64 { return 1 - math.Abs(math.Log(x/3)) }, 3, 0.5, 3 / math.E, 3 * math.E},
		{"delta-method probe far inside", func(x float64) float64 { return 1 - math.Abs(math.Log(x/3)) }, 3, 0.01, 3 / math.E, 3 * math.E},
		{"delta-method probe far outside", func(x float64) float64 { return 1 - math.Abs(math.Log(x/3)) }, 3, 50, 3 / math.E, 3 * math.E},
		{"closes between 0 and the walk's limit", func(x float64) float64 { return math.Min(x-2e-8, 7-x) }, 2, 0.3, 2e-8, 7},
		{"open below and above", func(float64) float64 { return 1 }, 2, 0.3, 0, math.Inf(1)},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			step := 1 + min(max(0.5*c.rel, 0.02), 1)
			lo, hi := r.bandEdges(gapX(c.f), c.x0, c.f(c.x0), step, c.rel)
			near := func(got, want float64) bool {
				if want == 0 || math.IsInf(want, 0) {
					return got == want
				}
				return math.Abs(math.Log(got/want)) <= 2e-13
			}
			if !near(lo, c.wantLo) || !near(hi, c.want) {
				t.Errorf("edges [%v, %v], want [%v, %v]", lo, hi, c.wantLo, c.want)
			}
		})
	}
}
