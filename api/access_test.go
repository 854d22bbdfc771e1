package api_test

import (
	"context"
	"net/http"
	"strings"
	"testing"
	"time"

	"curvekeeper/api"
	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// bound issues a runs:write token bound to instruments through the admin
// route and returns its secret.
func (e *env) bound(t *testing.T, name string, instruments ...string) string {
	t.Helper()
	r := e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": name, "scopes": []string{"runs:write"}, "instruments": instruments})
	tc := decode[oapi.TokenCreated](t, r, http.StatusCreated)
	if tc.Instruments == nil || len(*tc.Instruments) != len(instruments) {
		t.Fatalf("token created without its binding: %+v", tc)
	}
	return tc.Token
}

// wantRule checks a problem's detail names rule.
func wantNamedRule(t *testing.T, p api.Problem, rule string) {
	t.Helper()
	text := p.Detail
	for _, f := range p.Errors {
		text += " " + f.Detail
	}
	if !strings.Contains(text, rule) {
		t.Errorf("problem %q does not name the rule %s", p.Detail, rule)
	}
}

// TestTokenIssueRules: a runs:write token must be bound to instruments; one
// holding runs:write and curves:review needs the administrator's explicit
// choice.
func TestTokenIssueRules(t *testing.T) {
	e := newEnv(t)
	before := e.counts(t)
	p := wantProblem(t, e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": "ic-uploader", "scopes": []string{"runs:write"}}),
		http.StatusUnprocessableEntity, "/instruments")
	wantNamedRule(t, p, lab.RuleBindingRequired)
	p = wantProblem(t, e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": "both", "scopes": []string{"runs:write", "curves:review"},
		"instruments": []string{"ic-02"}}), http.StatusUnprocessableEntity, "/allow_dual_role")
	wantNamedRule(t, p, lab.RuleDualRole)
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("refused tokens wrote rows: %s", d)
	}
	r := e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": "both", "scopes": []string{"runs:write", "curves:review"},
		"instruments": []string{"ic-02"}, "allow_dual_role": true})
	decode[oapi.TokenCreated](t, r, http.StatusCreated)
	// Review and results tokens, and admin, stay unbound.
	decode[oapi.TokenCreated](t, e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": "qa", "scopes": []string{"curves:review"}}), http.StatusCreated)
}

// TestInstrumentBinding: a bound token posts only under its instruments'
// names and reaches only their runs and curves; an unbound token issued
// before binding existed keeps working.
func TestInstrumentBinding(t *testing.T) {
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	p7 := e.bound(t, "photometer-7-uploader", "photometer-7")
	p8 := e.bound(t, "photometer-8-uploader", "photometer-8", "ic-07")

	before := e.counts(t)
	p := wantProblem(t, e.postJSON(t, p8, "/v1/runs", runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))),
		http.StatusForbidden, "")
	if !strings.Contains(p.Detail, "instrument binding") {
		t.Errorf("403 detail %q does not name the binding", p.Detail)
	}
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("the refused run wrote rows: %s", d)
	}

	run := e.run(t, p7, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)))
	runPath := "/v1/runs/" + run.ID.String()
	curvePath := "/v1/curves/" + run.Curves[0].ID.String()
	if r := e.get(t, p7, runPath); r.status != http.StatusOK {
		t.Fatalf("own run: %s", r)
	}
	wantProblem(t, e.get(t, p8, runPath), http.StatusNotFound, "")

	before = e.counts(t)
	late := map[string]any{"samples": []map[string]any{{"id": "MX-1", "analyte": "nitrate", "responses": []float64{1.5},
		"acquired_at": baseTime.Add(time.Hour).Format(time.RFC3339)}}}
	wantProblem(t, e.postJSON(t, p8, runPath+"/samples", late), http.StatusNotFound, "")
	ccv := map[string]any{"level": "CCV", "concentration": 2, "responses": []float64{1.04}, "kind": "continuing",
		"acquired_at": baseTime.Add(2 * time.Hour).Format(time.RFC3339)}
	wantProblem(t, e.postJSON(t, p8, curvePath+"/verifications", ccv), http.StatusNotFound, "")
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("refused writes to another instrument's run wrote rows: %s", d)
	}
	if r := e.postJSON(t, p7, runPath+"/samples", late); r.status != http.StatusCreated {
		t.Errorf("own run's samples: %s", r)
	}
	if r := e.postJSON(t, p7, curvePath+"/verifications", ccv); r.status != http.StatusCreated {
		t.Errorf("own curve's verification: %s", r)
	}

	// An unbound runs:write token (issued before binding existed) keeps
	// working, and the store counts it for the warning at start.
	_, legacy, err := e.db.CreateToken(context.Background(), "legacy-uploader", []string{"runs:write"}, "test")
	if err != nil {
		t.Fatal(err)
	}
	if r := e.get(t, legacy, runPath); r.status != http.StatusOK {
		t.Errorf("unbound token reading a run: %s", r)
	}
	if n, err := e.db.UnboundWriteTokens(context.Background()); err != nil || n != 1 {
		t.Errorf("UnboundWriteTokens = %d, %v; want 1", n, err)
	}
}

// TestFourEyes: the principal that posted a run, or made a revision, does
// not review its curve unless the method allows self-review.
func TestFourEyes(t *testing.T) {
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	_, both := e.token(t, "bench-analyst", "runs:write", "curves:review")
	_, qa := e.token(t, "qa-lead", "curves:review")
	_, qa2 := e.token(t, "qa-second", "curves:review")
	approve := map[string]any{"decision": "approve", "reason": "checked against the SOP"}

	own := e.run(t, both, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)))
	ownCurve := "/v1/curves/" + own.Curves[0].ID.String()
	// Admin holds every scope, and is refused the same way.
	adminRun := e.run(t, e.admin, runBody("nitrate-uv", "photometer-7", baseTime.Add(time.Hour), standards("nitrate", 2)))
	adminCurve := "/v1/curves/" + adminRun.Curves[0].ID.String()
	before := e.counts(t)
	wantNamedRule(t, wantProblem(t, e.postJSON(t, both, ownCurve+"/review", approve), http.StatusUnprocessableEntity, ""), lab.RuleSelfReview)
	wantNamedRule(t, wantProblem(t, e.postJSON(t, e.admin, adminCurve+"/review", approve), http.StatusUnprocessableEntity, ""), lab.RuleSelfReview)
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("refused self-reviews wrote rows: %s", d)
	}
	if r := e.postJSON(t, qa, ownCurve+"/review", approve); r.status != http.StatusOK {
		t.Errorf("another principal's review: %s", r)
	}

	// The reviewer that made a revision by exclusion does not review it.
	rev := decode[oapi.Curve](t, e.postJSON(t, qa, adminCurve+"/exclusions", map[string]any{"reason": "air bubble in the L2 injection",
		"points": []map[string]any{{"level": "L2", "replicate": 1}}}), http.StatusCreated)
	revPath := "/v1/curves/" + rev.ID.String()
	wantNamedRule(t, wantProblem(t, e.postJSON(t, qa, revPath+"/review", approve), http.StatusUnprocessableEntity, ""), lab.RuleSelfReview)
	if r := e.postJSON(t, qa2, revPath+"/review", approve); r.status != http.StatusOK {
		t.Errorf("a second reviewer's review of the revision: %s", r)
	}

	// A method that allows self-review lets the poster review.
	r := e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": "solo-bench", "model": "linear", "weighting": "none",
		"analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L"}}, "allow_self_review": true})
	m := decode[oapi.Method](t, r, http.StatusCreated)
	if m.AllowSelfReview == nil || !*m.AllowSelfReview {
		t.Fatalf("method does not echo allow_self_review: %+v", m)
	}
	solo := e.run(t, both, runBody("solo-bench", "photometer-7", baseTime, standards("nitrate", 3)))
	if r := e.postJSON(t, both, "/v1/curves/"+solo.Curves[0].ID.String()+"/review", approve); r.status != http.StatusOK {
		t.Errorf("self-review under a method that allows it: %s", r)
	}
}

// pendingCurveEnv posts one run from an instrument token and returns the
// environment, its curve's path and a reviewer's token.
func pendingCurveEnv(t *testing.T) (e *env, curve, qa string) {
	t.Helper()
	e = newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	_, inst := e.token(t, "photometer-uploader", "runs:write")
	_, qa = e.token(t, "qa-lead", "curves:review")
	run := e.run(t, inst, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)))
	return e, "/v1/curves/" + run.Curves[0].ID.String(), qa
}

// TestSupersededCurveNotReviewed: a curve replaced by its exclusion
// revision never comes into force, so its review is 409 naming the
// revision.
func TestSupersededCurveNotReviewed(t *testing.T) {
	e, curve, qa := pendingCurveEnv(t)
	_, qa2 := e.token(t, "qa-second", "curves:review")
	rev := decode[oapi.Curve](t, e.postJSON(t, qa, curve+"/exclusions", map[string]any{"reason": "air bubble in the L2 injection",
		"points": []map[string]any{{"level": "L2", "replicate": 1}}}), http.StatusCreated)
	before := e.counts(t)
	p := wantProblem(t, e.postJSON(t, qa2, curve+"/review", map[string]any{"decision": "approve", "reason": "fine"}), http.StatusConflict, "")
	if !strings.Contains(p.Detail, rev.ID.String()) {
		t.Errorf("409 detail %q does not name the revision %s", p.Detail, rev.ID)
	}
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("the refused review wrote rows: %s", d)
	}
}

// TestReasonsRefuseBidiControls: a reason carrying an invisible
// bidirectional control (U+202A–U+202E, U+2066–U+2069) is refused 422.
func TestReasonsRefuseBidiControls(t *testing.T) {
	e, curve, qa := pendingCurveEnv(t)
	before := e.counts(t)
	for _, c := range []rune{0x202A, 0x202E, 0x2066, 0x2069} {
		reason := "checked " + string(c) + "deworb"
		wantProblem(t, e.postJSON(t, qa, curve+"/review", map[string]any{"decision": "reject", "reason": reason}),
			http.StatusUnprocessableEntity, "/reason")
		wantProblem(t, e.postJSON(t, qa, curve+"/exclusions", map[string]any{"reason": reason,
			"points": []map[string]any{{"level": "L2", "replicate": 1}}}), http.StatusUnprocessableEntity, "/reason")
	}
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("refused reasons wrote rows: %s", d)
	}
	// Other right-to-left text is a reason like any other.
	if r := e.postJSON(t, qa, curve+"/review", map[string]any{"decision": "reject", "reason": "נבדק"}); r.status != http.StatusOK {
		t.Errorf("a Hebrew reason: %s", r)
	}
}

// TestReadsByRole: each role reads what it acts on (the spec's scope
// table). A reviewer reads the run and the results it judges; a LIMS reads
// the run, the curve's audit trail and the printable record; an instrument
// reads the methods it posts for. People stay admin's. Before, QA and LIMS
// tokens got 403 on the run, and only admin read methods.
func TestReadsByRole(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	_, instrument := e.token(t, "photometer", "runs:write")
	_, lims := e.token(t, "lims", "results:read")
	_, qa := e.token(t, "qa", "curves:review")
	run := e.run(t, instrument, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)))
	runPath := "/v1/runs/" + run.ID.String()
	curve := "/v1/curves/" + run.Curves[0].ID.String()
	for _, c := range []struct {
		who, token, path string
		want             int
	}{
		{"qa", qa, runPath, http.StatusOK},
		{"qa", qa, runPath + "/results", http.StatusOK},
		{"qa", qa, "/v1/methods/nitrate-uv", http.StatusOK},
		{"qa", qa, "/v1/standard-materials", http.StatusOK},
		{"lims", lims, runPath, http.StatusOK},
		{"lims", lims, curve + "/audit", http.StatusOK},
		{"lims", lims, curve + "/record.pdf", http.StatusOK},
		{"lims", lims, "/v1/methods", http.StatusOK},
		{"instrument", instrument, "/v1/methods/nitrate-uv", http.StatusOK},
		{"instrument", instrument, curve + "/audit", http.StatusForbidden},
		{"qa", qa, "/v1/people", http.StatusForbidden},
		{"lims", lims, "/v1/people", http.StatusForbidden},
	} {
		if r := e.get(t, c.token, c.path); r.status != c.want {
			t.Errorf("%s GET %s: %d, want %d", c.who, c.path, r.status, c.want)
		}
	}
}
