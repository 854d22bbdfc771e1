package calib

import "testing"

// resultTerms returns the input terms of one reported result on the
// photometer curve (invented): the calibration term of two readings, a
// stock certificate, two dilution steps, a repeatability factor and an
// uncorrected recovery.
func resultTerms(tb testing.TB, r *Report) []UncertaintyTerm {
	tb.Helper()
	cal, _, err := r.CalibrationTerm("calibration", []float64{0.5, 0.52}, 1)
	if err != nil {
		tb.Fatal(err)
	}
	rep, err := RepeatabilityFactor("preparations", []float64{10.1, 9.9, 10.05})
	if err != nil {
		tb.Fatal(err)
	}
	ts := []UncertaintyTerm{cal, NormalTerm("stock", SourceStandard, 1, 0.004, 2), rep,
		RecoveryTerm("recovery", 0.98, 0.015, 20, false)}
	return append(ts, DilutionTerms("dilution", []VolumeStep{
		{Aliquot: 10, AliquotTol: 0.02, Final: 100, FinalTol: 0.1},
		{Aliquot: 5, AliquotTol: 0.015, Final: 50, FinalTol: 0.06}})...)
}

// BenchmarkGUMBudget is the per-result uncertainty work the service adds
// to a prediction: the calibration term (one Predict) and the GUM budget
// of eight terms. Compare side by side with BenchmarkPredictOnly.
func BenchmarkGUMBudget(b *testing.B) {
	r := fitOrFatal(b, photometerPoints(), Options{Model: Linear, Weighting: WeightInvX2})
	b.ReportAllocs()
	for b.Loop() {
		if _, err := ComputeBudget(BudgetInput{Terms: resultTerms(b, r)}); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkPredictOnly is the inverse prediction alone, the baseline of
// BenchmarkGUMBudget.
func BenchmarkPredictOnly(b *testing.B) {
	r := fitOrFatal(b, photometerPoints(), Options{Model: Linear, Weighting: WeightInvX2})
	b.ReportAllocs()
	for b.Loop() {
		if _, err := r.Predict([]float64{0.5, 0.52}, 1, 0); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkMonteCarlo is the same budget propagated with the default
// 200 000 draws.
func BenchmarkMonteCarlo(b *testing.B) {
	r := fitOrFatal(b, photometerPoints(), Options{Model: Linear, Weighting: WeightInvX2})
	in := BudgetInput{Terms: resultTerms(b, r)}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := MonteCarlo(in, MCOptions{Seed: 1}); err != nil {
			b.Fatal(err)
		}
	}
}
