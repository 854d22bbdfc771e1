package export

import "testing"

func TestUncertaintyStatement(t *testing.T) {
	for _, c := range []struct {
		u, unit  string
		k, level float64
		want     string
	}{
		{"0.21", "mg/L", 2.09, 0.95, "Expanded uncertainty U = 0.21 mg/L (k = 2.09, coverage probability about 95 %)"},
		{"0.21", "mg/L", 2, 0, "Expanded uncertainty U = 0.21 mg/L (k = 2.00)"},
		{"1.5", "", 0, 0, "Expanded uncertainty U = 1.5"},
	} {
		if got := UncertaintyStatement(c.u, c.unit, c.k, c.level); got != c.want {
			t.Errorf("UncertaintyStatement(%q, %q, %v, %v) = %q, want %q", c.u, c.unit, c.k, c.level, got, c.want)
		}
	}
}
