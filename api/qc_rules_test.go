package api_test

import (
	"strings"
	"testing"
)

// qcRun posts a clean nitrate run of the given levels on ic-07 and returns
// its id and its curve's id.
func qcRun(t *testing.T, e *qcEnv, token string, concs []float64, minute int, samples ...map[string]any) (string, string) {
	t.Helper()
	body := map[string]any{"method": "nitrate-ic", "instrument": "ic-07", "acquired_at": qcStamp(minute),
		"standards": qcStandards(concs, nil)}
	if len(samples) > 0 {
		body["samples"] = samples
	}
	var run struct {
		ID     string
		Curves []struct{ ID, Verdict string }
	}
	qcDecode(t, e.must(201, "POST", "/v1/runs", token, body), &run)
	if run.Curves[0].Verdict != "pass" {
		t.Fatalf("clean run: verdict %s", run.Curves[0].Verdict)
	}
	return run.ID, run.Curves[0].ID
}

// TestQCRequestsRefused: exclusions breaking each rule, verifications the
// curve's state forbids, unknown sample ids, bad cursors, duplicate samples
// and missing scopes get problem details naming the field and the rule.
func TestQCRequestsRefused(t *testing.T) {
	e := newQCEnv(t)
	instrument := e.token("ic-07", "runs:write")
	lims := e.token("lims", "results:read")
	qa := e.token("qa-analyst", "curves:review")
	e.must(201, "POST", "/v1/methods", e.admin, map[string]any{
		"name": "nitrate-ic", "model": "linear", "weighting": "1/x",
		"analytes":   []map[string]any{{"name": "nitrate", "unit": "mg/L"}},
		"acceptance": map[string]any{"verification_tolerance_pct": 15}, "max_curve_age_hours": 24,
	})
	var method struct {
		Acceptance struct {
			VerificationTolerancePct float64 `json:"verification_tolerance_pct"`
		}
		MaxCurveAgeHours *float64 `json:"max_curve_age_hours"`
	}
	qcDecode(t, e.must(200, "GET", "/v1/methods/nitrate-ic", e.admin, nil), &method)
	if method.Acceptance.VerificationTolerancePct != 15 || method.MaxCurveAgeHours == nil || *method.MaxCurveAgeHours != 24 {
		t.Errorf("method QC settings: %+v", method)
	}
	eight := []float64{0.5, 1, 2, 4, 6, 8, 10, 12}
	runID, curve := qcRun(t, e, instrument, eight, 0, map[string]any{"id": "S-10", "analyte": "nitrate", "responses": []float64{1}})
	exclusions := "/v1/curves/" + curve + "/exclusions"

	tests := []struct {
		name    string
		body    map[string]any
		pointer string
		rule    string
	}{
		{"over 25 % of the standards", map[string]any{"reason": "drift", "points": []map[string]any{
			{"level": "L2", "replicate": 1}, {"level": "L3", "replicate": 1}, {"level": "L4", "replicate": 1},
			{"level": "L5", "replicate": 1}, {"level": "L6", "replicate": 1}}}, "/points", "max_excluded_fraction"},
		{"both ends without a range reason", map[string]any{"reason": "both ends look off", "points": []map[string]any{
			{"level": "L1"}, {"level": "L8"}}}, "/range_reason", "both_range_ends_need_reason"},
		{"unknown level", map[string]any{"reason": "typo", "points": []map[string]any{{"level": "L9"}}}, "/points/0/level", "known_reading"},
		{"unknown replicate", map[string]any{"reason": "typo", "points": []map[string]any{{"level": "L2", "replicate": 3}}}, "/points/0/replicate", "known_reading"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, b := e.do("POST", exclusions, qa, tc.body)
			var p qcProblem
			qcDecode(t, b, &p)
			if p.Status != 422 {
				t.Fatalf("status %d, want 422: %s", p.Status, b)
			}
			wantRule(t, b, tc.pointer, tc.rule)
		})
	}
	t.Run("at least six levels kept", func(t *testing.T) {
		_, six := qcRun(t, e, instrument, eight[:6], 5)
		b := e.must(422, "POST", "/v1/curves/"+six+"/exclusions", qa, map[string]any{"reason": "L3 vial cracked", "points": []map[string]any{{"level": "L3"}}})
		wantRule(t, b, "/points", "min_levels_kept")
	})
	t.Run("nothing was stored by a refusal", func(t *testing.T) {
		var n int
		if err := e.db.Pool.QueryRow(t.Context(), `SELECT count(*) FROM curves WHERE revision_of IS NOT NULL`).Scan(&n); err != nil {
			t.Fatal(err)
		}
		if n != 0 {
			t.Errorf("%d revisions stored by refused exclusions", n)
		}
	})
	t.Run("scope", func(t *testing.T) {
		e.must(403, "POST", exclusions, lims, map[string]any{"reason": "x", "points": []map[string]any{{"level": "L2"}}})
		e.must(403, "POST", exclusions, instrument, map[string]any{"reason": "x", "points": []map[string]any{{"level": "L2"}}})
		e.must(403, "GET", "/v1/runs/"+runID+"/results", instrument, nil)
		e.must(403, "POST", "/v1/curves/"+curve+"/verifications", lims, map[string]any{
			"level": "CCV", "concentration": 5, "responses": []float64{1.01}, "kind": "initial", "acquired_at": qcStamp(10)})
	})

	// Both ends with a range reason is accepted; then the original is no
	// longer current.
	e.must(201, "POST", exclusions, qa, map[string]any{"reason": "both ends look off", "range_reason": "L1 below the blank, L8 saturates the detector",
		"points": []map[string]any{{"level": "L1"}, {"level": "L8"}}})
	b := e.must(409, "POST", exclusions, qa, map[string]any{"reason": "again", "points": []map[string]any{{"level": "L2", "replicate": 1}}})
	wantRule(t, b, "path:id", "curve_is_current")
	b = e.must(409, "POST", "/v1/curves/"+curve+"/verifications", instrument, map[string]any{
		"level": "CCV", "concentration": 5, "responses": []float64{1.01}, "kind": "initial", "acquired_at": qcStamp(10)})
	wantRule(t, b, "path:id", "curve_is_current")

	// Verification on a rejected curve, and before its calibration.
	_, rejected := qcRun(t, e, instrument, eight, 120)
	e.must(422, "POST", "/v1/curves/"+rejected+"/verifications", instrument, map[string]any{
		"level": "ICV", "concentration": 5, "responses": []float64{1.01}, "kind": "initial", "acquired_at": qcStamp(60)})
	var v struct {
		Verification struct {
			Passed   bool
			LimitPct float64 `json:"limit_pct"`
		}
	}
	// 16 % high: passes the default ±20 % but not this method's ±15 %.
	qcDecode(t, e.must(201, "POST", "/v1/curves/"+rejected+"/verifications", instrument, map[string]any{
		"level": "ICV", "concentration": 5, "responses": []float64{1.01 * 1.16}, "kind": "initial", "acquired_at": qcStamp(125)}), &v)
	if v.Verification.Passed || v.Verification.LimitPct != 15 {
		t.Errorf("ICV 16 %% high under a ±15 %% method: %+v", v.Verification)
	}
	e.must(200, "POST", "/v1/curves/"+rejected+"/review", qa, map[string]any{"decision": "reject", "reason": "wrong eluent"})
	b = e.must(409, "POST", "/v1/curves/"+rejected+"/verifications", instrument, map[string]any{
		"level": "CCV", "concentration": 5, "responses": []float64{1.01}, "kind": "continuing", "acquired_at": qcStamp(130)})
	wantRule(t, b, "path:id", "curve_not_rejected")

	// The curve in force expires by the method's maximum age (24 h).
	_, approved := qcRun(t, e, instrument, eight, 200)
	e.must(200, "POST", "/v1/curves/"+approved+"/review", qa, map[string]any{"decision": "approve"})
	e.must(200, "GET", "/v1/instruments/ic-07/curves/current?analyte=nitrate&at="+qcTime(200+60).Format("2006-01-02T15:04:05Z"), lims, nil)
	_, b = e.do("GET", "/v1/instruments/ic-07/curves/current?analyte=nitrate&at="+qcTime(200+25*60).Format("2006-01-02T15:04:05Z"), lims, nil)
	var p qcProblem
	qcDecode(t, b, &p)
	if p.Status != 404 || !strings.Contains(p.Detail, "expired") {
		t.Errorf("curve in force after 25 h under a 24 h method: %s", b)
	}

	// Samples: unknown id, duplicate id, before the run; bad cursor.
	b = e.must(404, "GET", "/v1/samples/NO-SUCH-SAMPLE", lims, nil)
	wantRule(t, b, "path:sample_id", "no result")
	b = e.must(422, "POST", "/v1/runs/"+runID+"/samples", instrument, map[string]any{"samples": []map[string]any{
		{"id": "S-10", "analyte": "nitrate", "responses": []float64{1}}}})
	wantRule(t, b, "/samples/0/id", "unique per analyte")
	b = e.must(422, "POST", "/v1/runs/"+runID+"/samples", instrument, map[string]any{"samples": []map[string]any{
		{"id": "S-11", "analyte": "nitrate", "responses": []float64{1}, "acquired_at": qcStamp(-5)}}})
	wantRule(t, b, "/samples/0/acquired_at", "")
	b = e.must(400, "GET", "/v1/results?cursor=AAAA", lims, nil)
	wantRule(t, b, "query:cursor", "")
}
