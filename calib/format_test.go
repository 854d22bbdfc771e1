package calib

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"
)

// TestAppendG6 checks appendG6 against the standard library's
// strconv.AppendFloat(v, 'g', 6, 64), which it must match byte for byte:
// random bit patterns over every exponent, short decimals, values beside
// the half-way points of the sixth digit, beside powers of ten and beside
// the %e/%f switch-overs.
func TestAppendG6(t *testing.T) {
	check := func(v float64) {
		t.Helper()
		want := strconv.FormatFloat(v, 'g', 6, 64)
		if got := string(appendG6(nil, v)); got != want {
			t.Fatalf("appendG6(%v = %#x) = %q, strconv gives %q", v, math.Float64bits(v), got, want)
		}
	}
	near := func(v float64, ulps int) {
		t.Helper()
		for k := -ulps; k <= ulps; k++ {
			b := int64(math.Float64bits(v)) + int64(k)
			check(math.Float64frombits(uint64(b)))
			check(-math.Float64frombits(uint64(b)))
		}
	}
	for _, v := range []float64{0, math.Copysign(0, -1), math.Inf(1), math.Inf(-1), math.NaN(),
		math.SmallestNonzeroFloat64, math.MaxFloat64, 1, 0.1, 0.5, 1.5, 2.5, 0.95, 0.975, 0.99, 0.01, 0.05,
		1e-4, 1e-5, 99999.95, 999999.5, 9999995, 0.000123456, 123456, 1234567, 1.0000005, 1.0000015} {
		check(v)
	}
	rng := rand.New(rand.NewPCG(7, 11))
	for e := -25; e <= 25; e++ {
		p := math.Pow(10, float64(e))
		near(p, 3)
		for _, m := range []float64{1.5, 9.999995, 9.9999949999, 9.99999500001, 1.000005, 1.0000049999, 1.23456, 1.234565, 5.000005} {
			near(m*p, 3)
		}
	}
	for i := 0; i < 200000; i++ {
		// Arbitrary bits: every exponent, and the fallback paths.
		check(math.Float64frombits(rng.Uint64()))
		// Short decimals like the statistics and thresholds of a report.
		m := float64(rng.IntN(10000000))
		e := rng.IntN(40) - 20
		v := m * math.Pow(10, float64(e))
		check(v)
		check(-v)
		// Half-way points of the sixth significant digit, and a few ulps off.
		h := (float64(100000+rng.IntN(900000)) + 0.5) * math.Pow(10, float64(rng.IntN(30)-20))
		near(h, 2)
		// Ordinary magnitudes, uniformly in the exponent.
		check(math.Exp(rng.NormFloat64() * 15))
	}
}

// TestTextInt checks the short path of text.i against strconv.Itoa.
func TestTextInt(t *testing.T) {
	for _, v := range []int{0, 1, 9, 10, 42, 99, 100, 101, 999, 1000, 123456, -1, -9, -10, -100, math.MaxInt, math.MinInt} {
		tx := newText()
		if got, want := string(tx.i(v).b), strconv.Itoa(v); got != want {
			t.Errorf("text.i(%d) = %q, want %q", v, got, want)
		}
		tx.free()
	}
}
