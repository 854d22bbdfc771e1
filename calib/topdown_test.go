package calib

import (
	"math"
	"testing"
)

// Nordtest TR 537 / ISO 11352 formulas against a hand computation on
// invented QC data (the worked examples of TR 537 are not in FIELD-NOTES):
//
//	recoveries 0.98, 1.02, 1.00, 0.97, 1.03: mean 1.00,
//	  u(Rw) = √((0.0004 + 0.0004 + 0 + 0.0009 + 0.0009)/4) = √0.00065 = 0.02549510
//	CRM 10.2 vs 10.0 (u 0.1) and 4.9 vs 5.0 (u 0.05): b = +0.02, −0.02,
//	  RMS_bias = 0.02, u(Cref) = mean(0.01, 0.01) = 0.01,
//	  u(bias) = √(0.0004 + 0.0001) = 0.02236068
//	u_c = √(0.00065 + 0.0005) = √0.00115 = 0.03391165, U = 0.06782330
func TestTopDownByHand(t *testing.T) {
	td, err := ComputeTopDown(TopDownInput{
		QCRecoveries: []float64{0.98, 1.02, 1.00, 0.97, 1.03},
		CRM:          []CRMResult{{Measured: 10.2, Reference: 10.0, RefStdUncertainty: 0.1}, {Measured: 4.9, Reference: 5.0, RefStdUncertainty: 0.05}},
	})
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		what      string
		got, want float64
	}{
		{"u(Rw)", td.URw, 0.02549510}, {"RMS bias", td.RMSBias, 0.02}, {"u(Cref)", td.URef, 0.01},
		{"u(bias)", td.UBias, 0.02236068}, {"u_c", td.Combined, 0.03391165}, {"U", td.Expanded, 0.06782330},
	} {
		if math.Abs(c.got-c.want) > 1e-8 {
			t.Errorf("%s = %.8f, want %.8f (hand computation in the comment)", c.what, c.got, c.want)
		}
	}
	if td.QCCount != 5 || td.CRMCount != 2 {
		t.Errorf("counts %d QC, %d CRM; want 5, 2", td.QCCount, td.CRMCount)
	}
	for name, in := range map[string]TopDownInput{
		"one QC value": {QCRecoveries: []float64{1}, CRM: []CRMResult{{1, 1, 0}}},
		"no CRM":       {QCRecoveries: []float64{1, 1.01}},
		"zero ref":     {QCRecoveries: []float64{1, 1.01}, CRM: []CRMResult{{1, 0, 0}}},
		"negative u":   {QCRecoveries: []float64{1, 1.01}, CRM: []CRMResult{{1, 1, -0.1}}},
	} {
		if _, err := ComputeTopDown(in); err == nil {
			t.Errorf("%s: accepted", name)
		}
	}
}
