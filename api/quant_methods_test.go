package api_test

import (
	"net/http"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
)

// An analyte's unit must be a UCUM code the service knows (lab/ucum's table,
// after the UCUM specification): "banana" is refused with a 422 naming the
// field, and so is an unknown reporting unit.
func TestMethodRefusesUnknownUnits(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	body := map[string]any{"name": "fruit", "model": "linear", "weighting": "none",
		"analytes": []map[string]any{{"name": "fructose", "unit": "banana"}}}
	p := wantProblem(t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusUnprocessableEntity, "/analytes/0/unit")
	if !strings.Contains(p.Detail, "banana") {
		t.Errorf("detail %q does not name the unit", p.Detail)
	}
	body["analytes"] = []map[string]any{{"name": "fructose", "unit": "mg/L", "quant": map[string]any{"reporting_unit": "MG/L"}}}
	wantProblem(t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusUnprocessableEntity, "/analytes/0/reporting_unit")
	body["analytes"] = []map[string]any{{"name": "fructose", "unit": "mg/L", "quant": map[string]any{"reporting_limit": 1, "detection_limit": 2}}}
	wantProblem(t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusUnprocessableEntity, "/analytes/0/detection_limit")
}

// The internal standard and reporting rules are stored with the method and
// shown with their defaults filled in: the IS window 60–125 % (common ICP-MS
// practice, from memory) and the service's own qualifier codes.
func TestMethodQuantRoundTrip(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	body := map[string]any{"name": "lcms-x", "model": "linear", "weighting": "1/x",
		"analytes": []map[string]any{
			{"name": "drug-a", "unit": "ng/mL", "quant": map[string]any{"internal_standard": "drug-a-d4",
				"reporting_unit": "ug/L", "reporting_limit": 1, "detection_limit": 0.3, "decimals": 2,
				"qualifiers": map[string]any{"below_rl": map[string]any{"code": "<", "words": "below the reporting limit"}}}},
			{"name": "drug-b", "unit": "ng/mL"}}}
	m := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusCreated)
	q := m.Analytes[0].Quant
	if q == nil || q.InternalStandard == nil || *q.InternalStandard != "drug-a-d4" || *q.IsWindowLowPct != 60 || *q.IsWindowHighPct != 125 {
		t.Fatalf("quant %+v, want drug-a-d4 with the 60–125 %% default window", q)
	}
	if *q.ReportingUnit != "ug/L" || *q.ReportingLimit != 1 || *q.DetectionLimit != 0.3 || q.Decimals == nil || *q.Decimals != 2 {
		t.Errorf("reporting rules %+v", q)
	}
	if q.Qualifiers.BelowRl.Code != "<" || q.Qualifiers.Estimated.Code != "EV" {
		t.Errorf("qualifiers %+v, want the lab's < and the default EV", q.Qualifiers)
	}
	if m.Analytes[1].Quant != nil {
		t.Errorf("drug-b has no rules, got %+v", m.Analytes[1].Quant)
	}
	// The same content posted again is the same revision.
	again := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusOK)
	if again.Revision != 1 {
		t.Errorf("identical repost made revision %d", again.Revision)
	}
}
