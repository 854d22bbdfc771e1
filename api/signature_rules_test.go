package api_test

import (
	"net/http"
	"slices"
	"strings"
	"testing"

	"curvekeeper/api"
	"curvekeeper/api/oapi"
	"curvekeeper/lab"
	"curvekeeper/store/dbtest"
)

// signatureMethod defines a linear method over nitrate whose curves need
// the given signatures ("approval" or "review_and_approval").
func (e *env) signatureMethod(t *testing.T, name, signatures string) {
	t.Helper()
	m := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": name, "model": "linear",
		"weighting": "none", "analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L"}}, "signatures": signatures}), http.StatusCreated)
	if m.Signatures == nil || string(*m.Signatures) != signatures {
		t.Fatalf("method %s signatures = %v, want %s", name, m.Signatures, signatures)
	}
}

// releaseStates reads the release states of a run's results.
func (e *env) releaseStates(t *testing.T, runID string) []string {
	t.Helper()
	var out []string
	for _, r := range decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+runID+"/results"), http.StatusOK).Results {
		out = append(out, string(r.ReleaseState))
	}
	return out
}

// A method may require a signed review, then a signed approval by another
// person, before its results are releasable; the token review route is
// refused on it; withdrawing the approval returns the curve to review and
// its results to provisional, audited.
func TestTwoSignaturesThenWithdrawal(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.person(t, "rita", "Rita Reviewer", "reviewer")
	e.person(t, "quinn", "Quinn Approver", "qa-approver")
	e.signatureMethod(t, "nitrate-2sig", "review_and_approval")
	_, instrument := e.token(t, "photometer-uploads", "runs:write")
	_, reviewTok := e.token(t, "qa-desk", "curves:review")
	body := runBody("nitrate-2sig", "photometer-7", baseTime, standards("nitrate", 5))
	body["samples"] = []map[string]any{{"id": "W-1", "analyte": "nitrate", "responses": []float64{1.5}},
		{"id": "W-2", "analyte": "nitrate", "responses": []float64{2.2}}}
	run := e.run(t, instrument, body)
	id, runID := run.Curves[0].ID.String(), run.ID.String()
	if run.Curves[0].Verdict != "pass" {
		t.Fatalf("fixture verdict %s, want pass", run.Curves[0].Verdict)
	}
	path := "/v1/curves/" + id
	sign := func(login, meaning, decision string) reply {
		m := map[string]any{"login": login, "password": login + "-password", "meaning": meaning}
		if decision != "" {
			m["decision"] = decision
		}
		return e.postJSON(t, reviewTok, path+"/signatures", m)
	}

	// The token route is refused on a method that requires signatures.
	p := wantProblem(t, e.postJSON(t, reviewTok, path+"/review", map[string]any{"decision": "approve", "reason": "looks fine"}),
		http.StatusUnprocessableEntity, "/decision")
	if !strings.Contains(p.Detail, "signed approval") {
		t.Errorf("token review refusal %q does not name the rule", p.Detail)
	}
	// Approval before any review signature: refused, naming the rule.
	p = wantProblem(t, sign("quinn", "approval", "approve"), http.StatusUnprocessableEntity, "/meaning")
	if !strings.Contains(p.Detail, "review before approval") {
		t.Errorf("approval without review: %q", p.Detail)
	}
	if got := e.releaseStates(t, runID); !slices.Equal(got, []string{"provisional", "provisional"}) {
		t.Errorf("before the signatures the results are %v, want provisional", got)
	}
	// quinn's own review does not count as the review of another person.
	decode[oapi.Signature](t, sign("quinn", "review", ""), http.StatusCreated)
	p = wantProblem(t, sign("quinn", "approval", "approve"), http.StatusUnprocessableEntity, "/meaning")
	if !strings.Contains(p.Detail, "approver's own") {
		t.Errorf("approval over own review: %q", p.Detail)
	}
	// rita reviews, quinn approves: releasable.
	review := decode[oapi.Signature](t, sign("rita", "review", ""), http.StatusCreated)
	approval := decode[oapi.Signature](t, sign("quinn", "approval", "approve"), http.StatusCreated)
	if c := decode[oapi.Curve](t, e.get(t, e.admin, path), http.StatusOK); c.Status != "approved" {
		t.Fatalf("after review and approval the curve is %s", c.Status)
	}
	if got := e.releaseStates(t, runID); !slices.Equal(got, []string{"releasable", "releasable"}) {
		t.Errorf("after two signatures the results are %v, want releasable", got)
	}

	// rita's review cannot be withdrawn under a live approval made after it.
	withdraw := func(sigID, login, reason string) reply {
		return e.postJSON(t, reviewTok, "/v1/signatures/"+sigID+"/withdrawal", map[string]any{
			"login": login, "password": login + "-password", "reason": reason})
	}
	wantProblem(t, withdraw(review.ID.String(), "rita", "wrong curve"), http.StatusConflict, "")

	// Withdrawing the approval returns the curve to review.
	decode[oapi.Signature](t, withdraw(approval.ID.String(), "quinn", "approved before the verification standard was read"), http.StatusOK)
	c := decode[oapi.Curve](t, e.get(t, e.admin, path), http.StatusOK)
	if c.Status != "pending_review" {
		t.Fatalf("after the withdrawal the curve is %s, want pending_review", c.Status)
	}
	if got := e.releaseStates(t, runID); !slices.Equal(got, []string{"provisional", "provisional"}) {
		t.Errorf("after the withdrawal the results are %v, want provisional again", got)
	}
	var actions []string
	for _, ev := range decode[oapi.AuditLog](t, e.get(t, e.admin, "/v1/audit?record_type=curve&record_id="+id), http.StatusOK).Events {
		actions = append(actions, ev.Action)
	}
	if !slices.Contains(actions, "signature.withdraw") || !slices.Contains(actions, "curve.return_to_review") {
		t.Errorf("the curve's audit rows lack the withdrawal and the return: %v", actions)
	}
	// The signatures stay, the approval marked withdrawn.
	list := decode[oapi.SignatureList](t, e.get(t, e.admin, path+"/signatures"), http.StatusOK)
	if len(list.Signatures) != 3 || list.Signatures[2].WithdrawnAt == nil {
		t.Errorf("signatures after withdrawal: %+v", list.Signatures)
	}
	// The curve can be signed again: rita's review still stands, so quinn's
	// new approval makes it approved once more.
	decode[oapi.Signature](t, sign("quinn", "approval", "approve"), http.StatusCreated)
	if got := e.releaseStates(t, runID); !slices.Equal(got, []string{"releasable", "releasable"}) {
		t.Errorf("after the second approval the results are %v, want releasable", got)
	}
}

// On a method that requires only a signed approval, one signature
// approves, and the token review route is refused; a method without the
// setting keeps the token route.
func TestSignedApprovalOnly(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.person(t, "quinn", "Quinn Approver", "qa-approver")
	e.signatureMethod(t, "nitrate-sig", "approval")
	e.method(t, "nitrate-plain", "nitrate")
	_, instrument := e.token(t, "photometer-uploads", "runs:write")
	_, reviewTok := e.token(t, "qa-desk", "curves:review")
	signed := e.run(t, instrument, runBody("nitrate-sig", "photometer-7", baseTime, standards("nitrate", 6))).Curves[0].ID.String()
	plain := e.run(t, instrument, runBody("nitrate-plain", "photometer-7", baseTime, standards("nitrate", 7))).Curves[0].ID.String()
	wantProblem(t, e.postJSON(t, reviewTok, "/v1/curves/"+signed+"/review", map[string]any{"decision": "reject", "reason": "x"}),
		http.StatusUnprocessableEntity, "/decision")
	decode[oapi.Curve](t, e.postJSON(t, reviewTok, "/v1/curves/"+plain+"/review", map[string]any{"decision": "approve", "reason": "ok"}), http.StatusOK)
	decode[oapi.Signature](t, e.postJSON(t, reviewTok, "/v1/curves/"+signed+"/signatures", map[string]any{
		"login": "quinn", "password": "quinn-password", "meaning": "approval", "decision": "approve"}), http.StatusCreated)
	if c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+signed), http.StatusOK); c.Status != "approved" {
		t.Errorf("after the approval signature the curve is %s", c.Status)
	}
}

// The lab-wide setting refuses a token's unsigned review on a method that
// sets nothing; a signed approval still approves.
func TestLabRequiresSignedApproval(t *testing.T) {
	t.Parallel()
	e := newEnvDB(t, api.Config{}, dbtest.NewDB(t), func(s *lab.Service) { s.People.RequireSignedApproval = true })
	e.person(t, "quinn", "Quinn Approver", "qa-approver")
	e.method(t, "nitrate-plain", "nitrate")
	_, instrument := e.token(t, "photometer-uploads", "runs:write")
	_, reviewTok := e.token(t, "qa-desk", "curves:review")
	id := e.run(t, instrument, runBody("nitrate-plain", "photometer-7", baseTime, standards("nitrate", 9))).Curves[0].ID.String()
	p := wantProblem(t, e.postJSON(t, reviewTok, "/v1/curves/"+id+"/review", map[string]any{"decision": "approve", "reason": "ok"}),
		http.StatusUnprocessableEntity, "/decision")
	if !strings.Contains(p.Detail, "signed approval") {
		t.Errorf("refusal %q does not name the rule", p.Detail)
	}
	decode[oapi.Signature](t, e.postJSON(t, reviewTok, "/v1/curves/"+id+"/signatures", map[string]any{
		"login": "quinn", "password": "quinn-password", "meaning": "approval", "decision": "approve"}), http.StatusCreated)
}
