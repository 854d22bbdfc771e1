package calib

import (
	"math"
	"testing"
)

// FuzzUncertainty: any three-term budget either is refused with an
// *InputError or gives a finite u_c ≥ 0 whose shares add to 1, a k ≥ 1
// and a U ≥ 0; a short Monte Carlo run and a decision on the result never
// panic.
func FuzzUncertainty(f *testing.F) {
	f.Add(10.0, 0.3, 4.0, 5.0, 0.1, 0.0, 2.0, 0.4, 9.0, false, uint64(1))
	f.Add(0.26, 0.018, 13.0, 0.332, 0.0018, 0.0, 5.73, 0.19, 0.0, true, uint64(2))
	f.Add(1e300, 1e300, 1.0, -1e-300, 0.0, 1.5, math.NaN(), 1.0, -1.0, true, uint64(3))
	f.Fuzz(func(t *testing.T, x1, u1, d1, x2, u2, d2, x3, u3, d3 float64, product bool, seed uint64) {
		model := ModelSum
		if product {
			model = ModelProduct
		}
		in := BudgetInput{Model: model, Terms: []UncertaintyTerm{
			{Name: "a", Value: x1, StdUncertainty: u1, DF: d1, Kind: DistTypeA},
			{Name: "b", Value: x2, StdUncertainty: u2, DF: d2, Kind: DistRectangular, Group: "g"},
			{Name: "c", Value: x3, StdUncertainty: u3, DF: d3, Exponent: -1, Sensitivity: -0.5},
		}}
		b, err := ComputeBudget(in)
		if err != nil {
			if _, ok := err.(*InputError); !ok {
				t.Fatalf("error %T %v, want *InputError", err, err)
			}
			return
		}
		if !(b.Combined >= 0) || math.IsInf(b.Combined, 0) || !(b.CoverageFactor >= 1) || !(b.Expanded >= 0) {
			t.Fatalf("u_c %v, k %v, U %v", b.Combined, b.CoverageFactor, b.Expanded)
		}
		if b.Combined > 0 && !math.IsInf(b.Combined*b.Combined, 0) && b.Combined*b.Combined > 1e-300 {
			var s float64
			for _, tr := range b.Terms {
				s += tr.Share
			}
			if math.Abs(s-1) > 1e-9 {
				t.Fatalf("shares add to %v", s)
			}
		}
		if _, err := MonteCarlo(in, MCOptions{Draws: 50, Seed: seed}); err != nil {
			if _, ok := err.(*InputError); !ok {
				t.Fatalf("Monte Carlo error %T %v", err, err)
			}
		}
		_, _ = Decide(b.Value, b.Expanded, UpperLimit(x2, ""), RuleGuardBand)
	})
}
