package calib

import (
	"math"
	"reflect"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"
)

func TestNewBaseline(t *testing.T) {
	tests := []struct {
		name     string
		values   []float64
		mean, sd float64
		tol      float64
		source   string
	}{
		{
			// The classic example of the standard deviation: population SD 2,
			// sample SD √(32/7). Textbook example, from memory; the sums are
			// checked by hand: Σ = 40, Σ(v − 5)² = 32.
			name: "textbook 2,4,4,4,5,5,7,9", values: []float64{2, 4, 4, 4, 5, 5, 7, 9},
			mean: 5, sd: math.Sqrt(32.0 / 7), tol: 1e-15, source: "textbook, from memory; hand-checked",
		},
		{
			// A large common offset must not cost digits (the values of a
			// slope series in counts per µg/L sit far from zero).
			name: "offset 1e9 + textbook", values: []float64{1e9 + 2, 1e9 + 4, 1e9 + 4, 1e9 + 4, 1e9 + 5, 1e9 + 5, 1e9 + 7, 1e9 + 9},
			mean: 1e9 + 5, sd: math.Sqrt(32.0 / 7), tol: 1e-9, source: "as above, shifted",
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			b, err := NewBaseline(tc.values)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(b.Mean-tc.mean) > tc.tol*math.Max(1, math.Abs(tc.mean)) || math.Abs(b.SD-tc.sd) > tc.tol*10 {
				t.Errorf("mean, sd = %.17g, %.17g; want %.17g, %.17g (%s)", b.Mean, b.SD, tc.mean, tc.sd, tc.source)
			}
			if b.N != len(tc.values) {
				t.Errorf("n = %d, want %d", b.N, len(tc.values))
			}
		})
	}
	t.Run("agrees with gonum stat.MeanStdDev", func(t *testing.T) {
		// Reference: gonum/stat, a general-purpose statistics library
		// (unbiased SD, nil weights).
		vals := []float64{1843.2, 1851.9, 1838.4, 1829.7, 1846.1, 1821.5, 1833.0, 1817.8, 1825.2, 1809.9}
		b, err := NewBaseline(vals)
		if err != nil {
			t.Fatal(err)
		}
		m, s := stat.MeanStdDev(vals, nil)
		if math.Abs(b.Mean-m) > 1e-12*m || math.Abs(b.SD-s) > 1e-10*s {
			t.Errorf("got %.15g ± %.15g, gonum %.15g ± %.15g", b.Mean, b.SD, m, s)
		}
		l := b.Limits()
		if l.WarningHigh != b.Mean+2*b.SD || l.ActionLow != b.Mean-3*b.SD || l.Centre != b.Mean {
			t.Errorf("limits %+v do not sit at mean ± 2 SD and ± 3 SD", l)
		}
	})
	for _, bad := range []struct {
		name   string
		values []float64
	}{
		{"empty", nil}, {"one value", []float64{3}}, {"no spread", []float64{4, 4, 4}},
		{"NaN", []float64{1, math.NaN(), 2}}, {"Inf", []float64{1, math.Inf(1)}},
	} {
		t.Run("refuses "+bad.name, func(t *testing.T) {
			if b, err := NewBaseline(bad.values); err == nil {
				t.Errorf("got %+v, want an error", b)
			}
		})
	}
}

// zs turns z-scores into values against the baseline 100 ± 10 used below;
// 100 + 10·z is exact for the one-decimal z used here.
func zs(z ...float64) []float64 {
	out := make([]float64, len(z))
	for i, v := range z {
		out[i] = 100 + 10*v
	}
	return out
}

var base100 = Baseline{Mean: 100, SD: 10, N: 20}

func TestWestgard(t *testing.T) {
	// Hand-built series, one per rule, each breaching its rule exactly once,
	// against the rule definitions of Westgard et al., Clin. Chem. 27 (1981)
	// 493 (restated from memory in trend.go). The 1-2s warnings that the
	// 2-2s and R-4s values raise as well are part of the expectation.
	v := func(rule string, pts ...int) Violation {
		return Violation{Rule: rule, Points: pts, Reject: rule != Rule12s}
	}
	tests := []struct {
		name string
		z    []float64
		want []Violation
	}{
		{"in control", []float64{0.5, -0.4, 1.2, -1.9, 0.1, 1.9, -0.8}, nil},
		{"1-2s once", []float64{0, 0.5, -0.5, 2.5, 0, -0.5}, []Violation{v(Rule12s, 3)}},
		{"1-3s once", []float64{0.5, -0.5, -3.5, -0.5, 0.5}, []Violation{v(Rule13s, 2)}},
		{"2-2s once", []float64{0.5, 2.5, 2.6, -0.5}, []Violation{v(Rule12s, 1), v(Rule22s, 1, 2), v(Rule12s, 2)}},
		{"R-4s once", []float64{0.5, 2.5, -2.4, 0.5}, []Violation{v(Rule12s, 1), v(RuleR4s, 1, 2), v(Rule12s, 2)}},
		{"4-1s once", []float64{-0.5, 1.5, 1.2, 1.8, 1.1, -0.3}, []Violation{v(Rule41s, 1, 2, 3, 4)}},
		{"10x once", []float64{-0.5, 0.3, 0.5, 0.2, 0.8, 0.4, 0.6, 0.1, 0.9, 0.7, 0.3, -0.2},
			[]Violation{v(Rule10x, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10)}},
		{"10x below, twelve values merged into one", []float64{-0.1, -0.2, -0.3, -0.4, -0.5, -0.6, -0.7, -0.8, -0.9, -0.5, -0.4, -0.3},
			[]Violation{v(Rule10x, 0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11)}},
		{"nine on one side is not 10x", []float64{0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, -0.1}, nil},
		{"a value at the mean ends a 10x run", []float64{0.1, 0.2, 0.3, 0.4, 0.5, 0, 0.6, 0.7, 0.8, 0.9, 0.3}, nil},
		{"on the 2 SD limit is not beyond it", []float64{2, 2, -2, 0.5}, nil},
		{"on the 3 SD limit is a warning, not 1-3s", []float64{3, 0}, []Violation{v(Rule12s, 0)}},
		{"2-2s needs the same side", []float64{2.5, -2.5}, []Violation{v(Rule12s, 0), v(RuleR4s, 0, 1), v(Rule12s, 1)}},
		{"three beyond +2 SD are one 2-2s", []float64{2.1, 2.2, 2.3}, []Violation{v(Rule12s, 0), v(Rule22s, 0, 1, 2), v(Rule12s, 1), v(Rule12s, 2)}},
		{"4-1s needs four in a row", []float64{1.5, 1.5, 1.5, 0.5, 1.5}, nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := Westgard(zs(tc.z...), base100)
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(got, tc.want) {
				t.Errorf("got  %+v\nwant %+v", got, tc.want)
			}
		})
	}
	t.Run("refuses a baseline without spread and non-finite values", func(t *testing.T) {
		if _, err := Westgard(zs(0, 1), Baseline{Mean: 100}); err == nil {
			t.Error("SD 0 accepted")
		}
		if _, err := Westgard([]float64{1, math.NaN()}, base100); err == nil {
			t.Error("NaN accepted")
		}
	})
}

func TestPointRules(t *testing.T) {
	vs, err := Westgard(zs(0.5, 2.5, 2.6, -0.5), base100)
	if err != nil {
		t.Fatal(err)
	}
	got := PointRules(4, vs)
	want := [][]string{nil, {Rule12s, Rule22s}, {Rule12s, Rule22s}, nil}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("got %q, want %q", got, want)
	}
}

func TestDriftCheck(t *testing.T) {
	// Twenty hand-built approved slopes alternating about 100 (mean exactly
	// 100; SD √(Σd²/19) with d = ±1, ±2 → SD = √(50/19) ≈ 1.622).
	var hist []float64
	for i := 0; i < 20; i++ {
		d := []float64{1, -1, 2, -2}[i%4]
		hist = append(hist, 100+d)
	}
	sd := math.Sqrt(50.0 / 19)
	// For 2-2s the previous value is part of the history (and its baseline):
	// it sits beyond −2 SD of the 21-value baseline, and the new value too.
	hist22 := append(append([]float64{}, hist...), 100-3*sd)
	b22, err := NewBaseline(hist22)
	if err != nil {
		t.Fatal(err)
	}
	if z := b22.Z(hist22[20]); z > -2 {
		t.Fatalf("setup: the previous value is at z = %v, not beyond −2 SD", z)
	}
	tests := []struct {
		name     string
		history  []float64
		value    float64
		computed bool
		passed   bool
		inDetail string
	}{
		{"in control", hist, 100.5, true, true, "no control rule"},
		{"1-3s rejects", hist, 100 - 3.5*sd, true, false, "1-3s"},
		{"warning only passes", hist, 100 + 2.5*sd, true, true, "warning"},
		{"2-2s with the previous value", hist22, b22.Mean - 2.5*b22.SD, true, false, "2-2s"},
		{"too little history", hist[:MinDriftBaseline-1], 50, false, false, "at least 10"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			c := DriftCheck("slope", tc.history, tc.value)
			if c.Name != CheckDrift || c.Computed != tc.computed || c.Passed != tc.passed {
				t.Errorf("got %s computed=%v passed=%v, want computed=%v passed=%v: %s", c.Name, c.Computed, c.Passed, tc.computed, tc.passed, c.Detail)
			}
			if !strings.Contains(c.Detail, tc.inDetail) {
				t.Errorf("detail %q does not mention %q", c.Detail, tc.inDetail)
			}
			if c.Source == "" {
				t.Error("no source")
			}
		})
	}
	t.Run("z statistic", func(t *testing.T) {
		// The 2-2s history has 21 values; use the plain one here.
		c := DriftCheck("slope", hist, 100-3.5*sd)
		if math.Abs(c.Statistic+3.5) > 1e-9 || c.Limit != 3 {
			t.Errorf("statistic %v limit %v, want −3.5 and 3", c.Statistic, c.Limit)
		}
	})
}

func TestPolicyAcceptsDriftAsMandatory(t *testing.T) {
	p := DefaultPolicy()
	p.Mandatory = append(p.Mandatory, CheckDrift)
	if err := p.validate(); err != nil {
		t.Errorf("drift refused as a mandatory check: %v", err)
	}
}
