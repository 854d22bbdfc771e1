package curveplot

import (
	"strings"
	"testing"

	"curvekeeper/calib"
)

func TestAltText(t *testing.T) {
	linear := func() *calib.Report {
		r := linearReport(t, sixteenStandards)
		r.Coefficients = []float64{-0.0012346, 0.1206789}
		r.RSquared = 0.999512
		return r
	}
	tests := []struct {
		name    string
		r       *calib.Report
		want    []string
		notWant []string
	}{
		{
			name: "linear",
			r:    linear(),
			want: []string{
				"Calibration curve for nitrate, concentration in ug/L.",
				"Model linear, weighting 1/x: y = −0.001235 + 0.1207·x, R² = 0.9995.",
				"16 readings of standards at 8 levels, 1 excluded from the fit.",
				"Working range 0.5 to 50 ug/L.",
				"95% confidence band",
				"Verdict: pass.",
				"qualified person",
			},
		},
		{
			name: "quadratic",
			r: func() *calib.Report {
				r := linear()
				r.Model, r.Coefficients = calib.Quadratic, []float64{0.002, 0.12512, -0.000213456}
				return r
			}(),
			want: []string{"Model quadratic, weighting 1/x: y = 0.002 + 0.1251·x − 0.0002135·x²"},
		},
		{
			name: "origin",
			r: func() *calib.Report {
				r := linear()
				r.Model, r.Coefficients = calib.LinearOrigin, []float64{0.12049}
				return r
			}(),
			want: []string{"Model linear through origin, weighting 1/x: y = 0.1205·x,"},
		},
		{
			name:    "failed",
			r:       failedReport(),
			want:    []string{"No curve could be fitted.", "3 readings of standards at 1 level, none excluded.", "Verdict: fail (1 mandatory check failed)."},
			notWant: []string{"Working range", "y ="},
		},
		{
			name: "nil",
			r:    nil,
			want: []string{"no report"},
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := AltText(tt.r, "nitrate", "ug/L")
			for _, w := range tt.want {
				if !strings.Contains(got, w) {
					t.Errorf("AltText lacks %q\ngot: %s", w, got)
				}
			}
			for _, w := range tt.notWant {
				if strings.Contains(got, w) {
					t.Errorf("AltText has %q\ngot: %s", w, got)
				}
			}
			if strings.Contains(got, "\n") {
				t.Errorf("AltText is not one paragraph: %q", got)
			}
		})
	}
}
