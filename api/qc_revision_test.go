package api_test

import (
	"strings"
	"testing"
)

// TestQCStateSurvivesRevision: a revision keeps the verification history of
// the curve it revises. A CCV reads 52.7 % high (invented); QA excludes one
// standard reading and approves the revision; the sample measured after the
// failed CCV stays withheld until a passing CCV follows, because an
// exclusion corrects a standard, not the instrument's drift.
func TestQCStateSurvivesRevision(t *testing.T) {
	e := newQCEnv(t)
	instrument := e.token("ic-09", "runs:write")
	lims := e.token("lims", "results:read")
	qa := e.token("qa-analyst", "curves:review")
	e.must(201, "POST", "/v1/methods", e.admin, map[string]any{
		"name": "nitrate-ic", "model": "linear", "weighting": "1/x",
		"analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L"}},
	})
	var run struct {
		ID     string
		Curves []struct{ ID, Verdict string }
	}
	qcDecode(t, e.must(201, "POST", "/v1/runs", instrument, map[string]any{
		"method": "nitrate-ic", "instrument": "ic-09", "acquired_at": qcStamp(0),
		"standards": qcStandards([]float64{0.5, 1, 2, 4, 6, 8, 10}, nil),
	}), &run)
	original := run.Curves[0].ID
	ccv := func(curve string, minutes int, factor float64) bool {
		var v struct{ Verification struct{ Passed bool } }
		qcDecode(t, e.must(201, "POST", "/v1/curves/"+curve+"/verifications", instrument, map[string]any{
			"level": "CCV-5", "concentration": 5, "responses": []float64{(0.01 + 0.2*5) * factor}, "kind": "continuing", "acquired_at": qcStamp(minutes),
		}), &v)
		return v.Verification.Passed
	}
	late := func(id string, minutes int) {
		e.must(201, "POST", "/v1/runs/"+run.ID+"/samples", instrument, map[string]any{"samples": []map[string]any{
			{"id": id, "analyte": "nitrate", "responses": []float64{0.81}, "acquired_at": qcStamp(minutes)}}})
	}
	if ccv(original, 30, 1.527) {
		t.Fatal("CCV 52.7 % high passed")
	}
	late("S-40", 40)
	var rev struct{ ID string }
	qcDecode(t, e.must(201, "POST", "/v1/curves/"+original+"/exclusions", qa, map[string]any{
		"points": []map[string]any{{"level": "L4", "replicate": 1}}, "reason": "L4 first injection shows a shoulder",
	}), &rev)
	// A second reviewer approves the revision (the four-eyes rule).
	e.must(200, "POST", "/v1/curves/"+rev.ID+"/review", e.token("qa-second", "curves:review"), map[string]any{"decision": "approve"})

	rs := runResults(t, e, lims, run.ID)
	wantState(t, "approved revision after a failed CCV", rs, "withheld", "S-40")
	if got := rs["S-40"][len(rs["S-40"])-1]; got.CurveID != rev.ID || !strings.Contains(got.ReleaseReason, "failed") {
		t.Errorf("S-40: against %s (%s), want against the revision %s, withheld by the failed CCV", got.CurveID, got.ReleaseReason, rev.ID)
	}

	// A passing CCV against the revision releases what follows it, not
	// what preceded it.
	if !ccv(rev.ID, 50, 1.01) {
		t.Fatal("CCV 1 % high failed")
	}
	late("S-55", 55)
	rs = runResults(t, e, lims, run.ID)
	wantState(t, "after a passing CCV", rs, "withheld", "S-40")
	wantState(t, "after a passing CCV", rs, "releasable", "S-55")
}
