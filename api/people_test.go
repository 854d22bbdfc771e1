package api_test

import (
	"net/http"
	"slices"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
	"curvekeeper/internal/password"
	"curvekeeper/store"
)

func init() {
	// A cheap Argon2id cost for tests (internal/password checks the
	// default cost against the reference vector).
	store.PasswordParams = password.Params{MemoryKiB: 64, Time: 1, Threads: 1, SaltLen: 16, KeyLen: 32}
}

// person opens an account through the API; its password is login+"-password".
func (e *env) person(t *testing.T, login, name string, roles ...string) oapi.Person {
	t.Helper()
	return decode[oapi.Person](t, e.postJSON(t, e.admin, "/v1/people", map[string]any{
		"login": login, "full_name": name, "roles": roles, "password": login + "-password"}), http.StatusCreated)
}

func TestSignaturesThroughTheAPI(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.person(t, "ana", "Ana Analyst", "analyst", "qa-approver")
	e.person(t, "quinn", "Quinn Approver", "qa-approver")
	wantProblem(t, e.postJSON(t, e.admin, "/v1/people", map[string]any{
		"login": "quinn", "full_name": "Another", "roles": []string{"analyst"}, "password": "0123456789"}), http.StatusConflict, "")

	// ana posts a run through a token of her own; two levels fail the checks.
	r := e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": "ana-uploads", "scopes": []string{"runs:write", "curves:review"}, "owner": "person:ana",
		"instruments": []string{"photometer-7"}, "allow_dual_role": true})
	anaTok := decode[oapi.TokenCreated](t, r, http.StatusCreated).Token
	e.method(t, "nitrate-uv", "nitrate")
	stds := standards("nitrate", 3)[:2]
	run := e.run(t, anaTok, runBody("nitrate-uv", "photometer-7", baseTime, stds))
	id := run.Curves[0].ID.String()
	if run.Curves[0].Verdict != "fail" {
		t.Fatalf("fixture verdict %s, want fail", run.Curves[0].Verdict)
	}
	sign := func(login, pw, reason string) reply {
		return e.postJSON(t, anaTok, "/v1/curves/"+id+"/signatures", map[string]any{
			"login": login, "password": pw, "meaning": "approval", "decision": "approve", "reason": reason})
	}
	p := wantProblem(t, sign("ana", "ana-password", "ok"), http.StatusUnprocessableEntity, "/login")
	if !strings.Contains(p.Detail, "second-person review") {
		t.Errorf("refusal %q does not name the rule", p.Detail)
	}
	wantProblem(t, sign("quinn", "wrong-password", "ok"), http.StatusForbidden, "")
	wantProblem(t, sign("quinn", "quinn-password", ""), http.StatusUnprocessableEntity, "/reason")
	sig := decode[oapi.Signature](t, sign("quinn", "quinn-password", "two levels only: method transfer, SOP 12 §4"), http.StatusCreated)
	if sig.PrintedName != "Quinn Approver" || sig.Meaning != "approval" || !sig.ContentMatches || len(sig.ContentSha256) != 64 ||
		!strings.HasPrefix(sig.Manifestation, "Quinn Approver — approval — ") {
		t.Errorf("signature = %+v", sig)
	}
	c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+id), http.StatusOK)
	if c.Status != "approved" {
		t.Errorf("curve status after approval signature: %s", c.Status)
	}
	list := decode[oapi.SignatureList](t, e.get(t, e.admin, "/v1/curves/"+id+"/signatures"), http.StatusOK)
	if len(list.Signatures) != 1 || list.Signatures[0].ID != sig.ID {
		t.Fatalf("signatures = %+v", list)
	}
	w := decode[oapi.Signature](t, e.postJSON(t, e.admin, "/v1/signatures/"+sig.ID.String()+"/withdrawal", map[string]any{
		"login": "quinn", "password": "quinn-password", "reason": "signed the wrong curve"}), http.StatusOK)
	if w.WithdrawnAt == nil || w.WithdrawalReason == nil || *w.WithdrawalReason != "signed the wrong curve" {
		t.Errorf("withdrawn = %+v", w)
	}
	// The audit trail by person and by record.
	actions := func(path string) []string {
		var out []string
		for _, ev := range decode[oapi.AuditLog](t, e.get(t, e.admin, path), http.StatusOK).Events {
			out = append(out, ev.Action)
		}
		return out
	}
	if got := actions("/v1/audit?person=quinn"); !slices.Contains(got, "signature.sign") || !slices.Contains(got, "signature.withdraw") || slices.Contains(got, "run.create") {
		t.Errorf("quinn's audit rows: %v", got)
	}
	if got := actions("/v1/audit?person=ana"); !slices.Contains(got, "run.create") || slices.Contains(got, "signature.sign") {
		t.Errorf("ana's audit rows: %v", got)
	}
	if got := actions("/v1/audit?record_type=curve&record_id=" + id); !slices.Contains(got, "curve.review") || !slices.Contains(got, "signature.sign") {
		t.Errorf("the curve's audit rows: %v", got)
	}
	// Disabling ana refuses her token from the next request on.
	decode[oapi.Person](t, e.postJSON(t, e.admin, "/v1/people/ana/disable", nil), http.StatusOK)
	if r := e.get(t, anaTok, "/v1/curves/"+id); r.status != http.StatusUnauthorized {
		t.Errorf("a disabled person's token: %d, want 401", r.status)
	}
}

// TestFourEyesFollowsThePerson: the four-eyes rule is about people, not
// tokens. A run posted through one of ana's tokens is not reviewed through
// another token of hers, while a token of another person may review it.
// Before, the rule compared the tokens, so ana's second token approved her
// own run.
func TestFourEyesFollowsThePerson(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.person(t, "ana", "Ana Analyst", "analyst", "reviewer")
	e.person(t, "rui", "Rui Reviewer", "reviewer")
	issue := func(name, owner string, scopes []string, instruments []string) string {
		body := map[string]any{"name": name, "scopes": scopes, "owner": owner}
		if instruments != nil {
			body["instruments"] = instruments
		}
		return decode[oapi.TokenCreated](t, e.postJSON(t, e.admin, "/v1/tokens", body), http.StatusCreated).Token
	}
	uploads := issue("ana-uploads", "person:ana", []string{"runs:write"}, []string{"photometer-7"})
	anaReview := issue("ana-review", "person:ana", []string{"curves:review"}, nil)
	ruiReview := issue("rui-review", "person:rui", []string{"curves:review"}, nil)
	e.method(t, "nitrate-uv", "nitrate")
	review := func(tok, id string) reply {
		return e.postJSON(t, tok, "/v1/curves/"+id+"/review", map[string]any{"decision": "approve", "reason": "checked against the bench log"})
	}
	first := e.run(t, uploads, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 5))).Curves[0].ID.String()
	p := wantProblem(t, review(anaReview, first), http.StatusUnprocessableEntity, "/decision")
	if !strings.Contains(p.Detail, "four_eyes") || !strings.Contains(p.Detail, "person:ana") {
		t.Errorf("refusal %q does not name the rule and the person", p.Detail)
	}
	if c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+first), http.StatusOK); c.Status != "pending_review" {
		t.Errorf("after the refusal the curve is %s, want pending_review", c.Status)
	}
	if r := review(ruiReview, first); r.status != http.StatusOK {
		t.Errorf("another person's token: %s", r)
	}
}
