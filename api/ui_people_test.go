package api_test

import (
	"net/http"
	"net/url"
	"strings"
	"testing"
)

// signInPerson signs in with login and password through the sign-in form.
func (b *browser) signInPerson(login, password string) page {
	b.t.Helper()
	form := b.get("/ui/sign-in")
	return b.post("/ui/sign-in", url.Values{"csrf_token": {form.csrf(b.t)}, "login": {login}, "password": {password}, "next": {"/ui/curves"}})
}

// A person signs in with login and password (a wrong password is refused
// and opens no session) and signs, on the revision's page, the
// responsibility for the exclusion of a standard; the page shows it.
func TestUIPersonSignsExclusion(t *testing.T) {
	e := newUIEnv(t, false)
	e.api(t, e.admin, http.MethodPost, "/v1/people", map[string]any{"login": "ana", "full_name": "Ana Analyst",
		"roles": []string{"analyst"}, "password": "ana-password-1"}, http.StatusCreated, nil)
	var rev struct {
		ID string `json:"id"`
	}
	e.api(t, e.admin, http.MethodPost, "/v1/curves/"+e.curves[len(e.curves)-1]+"/exclusions", map[string]any{
		"reason": "Pb-3 replicate 1: nebuliser clog noted in the run log", "points": []map[string]any{{"level": "Pb-3", "replicate": 1}}},
		http.StatusCreated, &rev)

	b := e.browser(t)
	if p := b.signInPerson("ana", "not-the-password"); p.status != http.StatusUnauthorized || !strings.Contains(p.body, "login or password is wrong") {
		t.Fatalf("wrong password: %d", p.status)
	}
	if p := b.signInPerson("ana", "ana-password-1"); p.status != http.StatusSeeOther {
		t.Fatalf("sign in: %d %s", p.status, p.body)
	}
	page := b.get("/ui/curves/" + rev.ID)
	if !strings.Contains(page.body, "Ana Analyst") || !strings.Contains(page.body, `id="m-exclusion"`) || strings.Contains(page.body, `id="review-form"`) {
		t.Fatalf("the revision's page for ana lacks her name or the exclusion option, or shows the unsigned review form")
	}
	// The login field is the session's: another login typed in is ignored.
	r := b.post("/ui/curves/"+rev.ID+"/sign", url.Values{"csrf_token": {page.csrf(t)}, "meaning": {"exclusion"},
		"login": {"someone-else"}, "password": {"ana-password-1"}, "reason": {"I excluded it; see the run log"}})
	if r.status != http.StatusSeeOther {
		t.Fatalf("sign the exclusion: %d %s", r.status, r.body)
	}
	page = b.get("/ui/curves/" + rev.ID)
	if !strings.Contains(page.body, "Ana Analyst — responsibility for the exclusion of standards — ") {
		t.Errorf("the page does not show the exclusion signature")
	}
	// A person's session has no unsigned review: the old form's route
	// refuses it (a person signs).
	r = b.post("/ui/curves/"+rev.ID+"/review", url.Values{"csrf_token": {page.csrf(t)}, "decision": {"approve"}, "reason": {"fine"}})
	if r.status != http.StatusUnprocessableEntity || !strings.Contains(r.body, "approves or rejects by signing") {
		t.Errorf("a person's unsigned review: %d", r.status)
	}
	// An analyst may not approve.
	r = b.post("/ui/curves/"+rev.ID+"/sign", url.Values{"csrf_token": {page.csrf(t)}, "meaning": {"approval"}, "decision": {"approve"},
		"password": {"ana-password-1"}})
	if r.status != http.StatusForbidden && r.status != http.StatusUnprocessableEntity {
		t.Errorf("an analyst's approval: %d", r.status)
	}
	if !strings.Contains(r.body, "qa-approver") {
		t.Errorf("the refusal does not name the role")
	}
}
