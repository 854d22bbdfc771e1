package reported

import (
	"math"
	"strconv"
	"strings"
	"testing"
)

// FuzzRound: Round never panics on a finite value; the text parses to the
// value returned; it lies within one unit in the last place kept of v (half
// a unit, plus the guard-digit step); and it has the decimals asked for.
func FuzzRound(f *testing.F) {
	for _, v := range []float64{2.665, 15.45, 999.5, 0.0004, 12345, -2.665, 0, 1e-300, 1.7e308} {
		f.Add(v, uint8(3), false, false)
		f.Add(v, uint8(2), true, true)
	}
	f.Fuzz(func(t *testing.T, v float64, places uint8, decimals, away bool) {
		if math.IsNaN(v) || math.IsInf(v, 0) || math.Abs(v) > 1e300 {
			return // rounding 1.7e308 up overflows: Round returns an error there
		}
		r := Rounding{SignificantFigures: int(places%12) + 1}
		if decimals {
			r = Rounding{UseDecimals: true, Decimals: int(places % 16)}
		}
		if away {
			r.Mode = HalfAwayFromZero
		}
		text, got, err := r.Round(v)
		if err != nil {
			t.Fatalf("Round(%v) with %+v: %v", v, r, err)
		}
		if p, err := strconv.ParseFloat(text, 64); err != nil || p != got {
			t.Fatalf("text %q parses to %v, %v; value %v", text, p, err, got)
		}
		var ulp float64
		if decimals {
			ulp = math.Pow(10, -float64(r.Decimals))
			_, frac, _ := strings.Cut(text, ".")
			if len(frac) != r.Decimals {
				t.Fatalf("%q has %d decimals, want %d", text, len(frac), r.Decimals)
			}
		} else if v != 0 {
			ulp = math.Pow(10, math.Floor(math.Log10(math.Abs(v)))-float64(r.SignificantFigures)+1)
		}
		if math.Abs(got-v) > ulp*(1+1e-9)+math.Abs(v)*1e-11 {
			t.Fatalf("Round(%v) with %+v = %q, more than one unit %g away", v, r, text, ulp)
		}
	})
}
