package ucum

import (
	"math"
	"testing"
)

// FuzzParse: Parse never panics; a code it accepts converts to itself with
// factor 1, and its factor is finite and > 0.
func FuzzParse(f *testing.F) {
	for _, e := range Table() {
		f.Add(e.Code)
	}
	for _, s := range []string{"MG/L", "banana", "ug/L.mL/g", "/s", "cm3", "m-2", "{", "[ppm", "da", "10*3", "mg//L", "{a}{b}"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, code string) {
		u, err := Parse(code)
		if err != nil {
			return
		}
		if !(u.Factor > 0) || math.IsInf(u.Factor, 0) {
			t.Fatalf("%q: factor %v", code, u.Factor)
		}
		k, err := Factor(code, code)
		if err != nil || k != 1 {
			t.Fatalf("%q to itself: %v, %v", code, k, err)
		}
	})
}
