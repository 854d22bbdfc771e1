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
