package qaui

import "testing"

// TestSigFig: numbers on the pages keep n significant figures in plain
// decimals (the rounding is strconv's, round half to even on the binary
// value), so a reader never meets 1.63e+04 for a detector response.
func TestSigFig(t *testing.T) {
	for _, c := range []struct {
		v    float64
		n    int
		want string
	}{
		{16300.4, 4, "16300"},
		{16243.9, 4, "16240"},
		{1618.2, 4, "1618"},
		{0.0043612, 4, "0.004361"},
		{0.5, 4, "0.5000"},
		{9.99960, 4, "10.00"},
		{-0.96, 3, "-0.960"},
		{123456789, 3, "123000000"},
		{0, 4, "0"},
		{2.5e-9, 3, "2.5e-09"},
		{4.2e13, 3, "4.2e+13"},
	} {
		if got := sigFig(c.v, c.n); got != c.want {
			t.Errorf("sigFig(%v, %d) = %q, want %q", c.v, c.n, got, c.want)
		}
	}
}
