package lab

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"
)

// TestPrepareMaterial checks a certificate with a tolerance and a two-step
// preparation against hand computations (JCGM 100 §5.1.6 for a product of
// factors; tolerances rectangular, u = a/√3, Eurachem/CITAC QUAM App. E.1).
func TestPrepareMaterial(t *testing.T) {
	exp := time.Date(2027, 1, 1, 0, 0, 0, 0, time.UTC)
	tol := 5.0
	crm, err := PrepareMaterial(MaterialInput{Code: "CRM", Kind: MaterialReference, Analyte: "Pb", Unit: "mg/L",
		Value: 1000, Tolerance: &tol, ExpiresAt: exp}, nil)
	if err != nil {
		t.Fatal(err)
	}
	// u = 5/√3 = 2.88675 mg/L, relative 0.00288675 (hand computation).
	if math.Abs(crm.RelativeUncertainty-0.00288675) > 1e-8 {
		t.Errorf("relative u %v, want 0.00288675", crm.RelativeUncertainty)
	}
	lvl, err := PrepareMaterial(MaterialInput{Code: "L1", Kind: MaterialLevel, Level: "L1", PreparedFrom: "CRM", ExpiresAt: exp,
		Preparation: []PrepStep{{1, 0.008, 100, 0.1}, {5, 0.015, 50, 0.05}}}, &crm)
	if err != nil {
		t.Fatal(err)
	}
	// value = 1000·(1/100)·(5/50) = 1 mg/L; u_rel² = 0.00288675² +
	// (0.008/(√3·1))² + (0.1/(√3·100))² + (0.015/(√3·5))² + (0.05/(√3·50))²
	// = 8.3333e-6 + 2.13333e-5 + 3.3333e-7 + 3.0e-6 + 3.3333e-7 = 3.33333e-5,
	// u_rel = 0.0057735 (hand computation).
	if math.Abs(lvl.Value-1) > 1e-12 || lvl.Analyte != "Pb" || lvl.Unit != "mg/L" {
		t.Errorf("level %+v, want 1 mg/L of Pb", lvl.MaterialInput)
	}
	if math.Abs(lvl.RelativeUncertainty-0.0057735) > 1e-7 {
		t.Errorf("level relative u %v, want 0.0057735", lvl.RelativeUncertainty)
	}
	for name, c := range map[string]struct {
		in     MaterialInput
		parent *Material
		field  string
	}{
		"both certificate forms": {MaterialInput{Code: "X", Kind: MaterialReference, Analyte: "Pb", Unit: "mg/L", Value: 1,
			Tolerance: &tol, Expanded: &tol, K: &tol, ExpiresAt: exp}, nil, "/expanded_uncertainty"},
		"level without parent": {MaterialInput{Code: "X", Kind: MaterialLevel, Level: "L1", Analyte: "Pb", Unit: "mg/L",
			Value: 1, Tolerance: &tol, ExpiresAt: exp}, nil, "/prepared_from"},
		"aliquot above final": {MaterialInput{Code: "X", Kind: MaterialStock, PreparedFrom: "CRM", ExpiresAt: exp,
			Preparation: []PrepStep{{20, 0.01, 10, 0.01}}}, &crm, "/preparation/0/aliquot_ml"},
		"no expiry": {MaterialInput{Code: "X", Kind: MaterialReference, Analyte: "Pb", Unit: "mg/L", Value: 1,
			Tolerance: &tol}, nil, "/expires_at"},
	} {
		_, err := PrepareMaterial(c.in, c.parent)
		var le *Error
		if err == nil || !errors.As(err, &le) || le.Field != c.field {
			t.Errorf("%s: error %v, want a field error at %s", name, err, c.field)
		}
	}
}

// TestStandardsCheckPreparedAfterParentExpired: a stock in date at the run
// but prepared after its reference material expired fails the check.
func TestStandardsCheckPreparedAfterParentExpired(t *testing.T) {
	crmExp := time.Date(2026, 5, 1, 0, 0, 0, 0, time.UTC)
	prepared := time.Date(2026, 5, 2, 0, 0, 0, 0, time.UTC)
	run := time.Date(2026, 4, 20, 0, 0, 0, 0, time.UTC) // before either expiry
	lineage := map[string]*Material{
		"CRM":   {MaterialInput: MaterialInput{Code: "CRM", Kind: MaterialReference, ExpiresAt: crmExp}},
		"STOCK": {MaterialInput: MaterialInput{Code: "STOCK", Kind: MaterialStock, PreparedFrom: "CRM", PreparedAt: &prepared, ExpiresAt: crmExp.AddDate(0, 3, 0)}},
	}
	ch := standardsCheck([]string{"STOCK"}, lineage, run, false)
	if ch.Passed || ch.Statistic != 1 || !ch.Mandatory || !strings.Contains(ch.Detail, "prepared") {
		t.Errorf("check %+v, want one failure: prepared from an expired stock", ch)
	}
	lineage["STOCK"].PreparedAt = &run
	if ch := standardsCheck([]string{"STOCK"}, lineage, run, true); !ch.Passed || ch.Mandatory {
		t.Errorf("check %+v, want an advisory pass", ch)
	}
}
