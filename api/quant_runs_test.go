package api_test

import (
	"math"
	"net/http"
	"slices"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
)

// An internal-standard run end to end. Worked example computed by hand:
// the ratios A_x/A_is of the standards lie exactly on 0.1·c + 0.02 while the
// IS responses vary, so a fit on the ratios (any least squares, FIELD-NOTES
// §8, US EPA SW-846 8000 §11.4.3) recovers slope 0.1 and intercept 0.02 and a
// sample of ratio 0.82 reads x̂0 = (0.82 − 0.02)/0.1 = 8 ng/mL, undiluted.
// A fit on the raw responses would not: they are not on a line.
//
// The reported value (FIELD-NOTES §8): x̂0 8 ng/mL × dilution 5 × 10 mL ÷
// 2 g ÷ dry fraction 0.8 = 250 ng/g = 250 ug/kg, between the detection
// limit 100 and the reporting limit 300 ug/kg, so "estimated" (EV).
//
// The IS check: the calibrators' mean IS response is 1000 (1000, 1100, 900,
// 1050, 950, 1000); a sample with IS 500 recovers 50 %, outside the default
// 60–125 % (common ICP-MS practice, from memory): flagged and withheld.
func TestInternalStandardRunAndReportedValue(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{
		"name": "lcms-drugs", "model": "linear", "weighting": "none",
		"analytes": []map[string]any{{"name": "drug-a", "unit": "ng/mL", "quant": map[string]any{
			"internal_standard": "drug-a-d4", "reporting_unit": "ug/kg", "reporting_limit": 300, "detection_limit": 100}}}}),
		http.StatusCreated)
	concs := []float64{1, 2, 4, 8, 16, 32}
	is := []float64{1000, 1100, 900, 1050, 950, 1000}
	var standards []map[string]any
	for i, c := range concs {
		ratio := 0.1*c + 0.02
		standards = append(standards, map[string]any{"analyte": "drug-a", "level": "L" + string(rune('1'+i)),
			"concentration": c, "responses": []float64{ratio * is[i]}, "is_responses": []float64{is[i]}})
	}
	run := e.run(t, e.admin, map[string]any{"method": "lcms-drugs", "instrument": "lcms-1",
		"acquired_at": "2026-03-06T09:00:00Z", "standards": standards,
		"samples": []map[string]any{
			{"id": "S-1", "analyte": "drug-a", "responses": []float64{0.82 * 1000}, "is_responses": []float64{1000},
				"dilution": 5, "sample_amount": 2, "sample_amount_unit": "g", "final_volume": 10, "final_volume_unit": "mL", "dry_fraction": 0.8},
			{"id": "S-2", "analyte": "drug-a", "responses": []float64{0.82 * 500}, "is_responses": []float64{500},
				"sample_amount": 2, "sample_amount_unit": "g", "final_volume": 10, "final_volume_unit": "mL"},
		}})
	res := decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+run.ID.String()+"/results"), http.StatusOK)
	if len(res.Results) != 2 {
		t.Fatalf("%d results, want 2", len(res.Results))
	}
	s1, s2 := res.Results[0], res.Results[1]
	if s1.Concentration == nil || math.Abs(*s1.Concentration-40) > 1e-9 {
		t.Fatalf("S-1 concentration %v, want 8 ng/mL × dilution 5 = 40", s1.Concentration)
	}
	if s1.InternalStandard == nil || !s1.InternalStandard.Passed || s1.InternalStandard.RecoveryPct != 100 || s1.InternalStandard.CalibratorMean != 1000 {
		t.Errorf("S-1 IS check %+v, want 100 %% of 1000, passed", s1.InternalStandard)
	}
	if strings.Contains(s1.ReleaseReason, "internal standard") || slices.Contains(s1.Flags, "is_outside_window") {
		t.Errorf("S-1 withheld for its IS: %s %v", s1.ReleaseReason, s1.Flags)
	}
	rv := s1.Reported
	if rv == nil {
		t.Fatal("S-1 has no reported value")
	}
	if math.Abs(rv.X0-8) > 1e-9 || math.Abs(rv.Result-250) > 1e-9 || rv.Unit != "ug/kg" || rv.Text != "250" {
		t.Errorf("reported %+v, want x̂0 8, 250 ug/kg printed 250", rv)
	}
	if len(rv.Factors) != 4 || len(rv.Qualifiers) != 1 || rv.Qualifiers[0].Code != "EV" {
		t.Errorf("factors %+v qualifiers %+v, want dilution, final volume, sample amount, dry fraction and EV", rv.Factors, rv.Qualifiers)
	}
	if len(rv.Cautions) == 0 {
		t.Error("the reported value carries no caution")
	}
	if s2.ReleaseState != "withheld" || !strings.Contains(s2.ReleaseReason, "50.0 %") || !slices.Contains(s2.Flags, "is_outside_window") {
		t.Errorf("S-2 %s %q %v, want withheld with the 50 %% recovery and the flag", s2.ReleaseState, s2.ReleaseReason, s2.Flags)
	}
	if s2.Concentration == nil || math.Abs(*s2.Concentration-8) > 1e-9 {
		t.Errorf("S-2 concentration %v, want 8 (the ratio is what counts)", s2.Concentration)
	}
	if s2.Reported == nil || len(s2.Reported.Qualifiers) == 0 || s2.Reported.Qualifiers[len(s2.Reported.Qualifiers)-1].Code != "IS" {
		t.Errorf("S-2 reported %+v, want the IS qualifier", s2.Reported)
	}

	// A standard of an IS analyte without its IS responses is refused.
	standards[0]["is_responses"] = nil
	delete(standards[0], "is_responses")
	wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", map[string]any{"method": "lcms-drugs", "instrument": "lcms-1",
		"acquired_at": "2026-03-06T10:00:00Z", "standards": standards}), http.StatusUnprocessableEntity, "/standards/0/is_responses")
}
