package api_test

import (
	"net/http"
	"net/url"
	"strings"
	"testing"
	"time"

	"curvekeeper/lab"
)

// TestUICurvePageShowsWhatTheReviewerDecidesOn: the curve page shows why
// this weighting (each candidate's score), each standard judged against the
// back-calculation rule with its weight, the run's operator, the samples
// quantified on the curve with their release states, the verification
// standards and their effect, and the previous curve beside this one; an
// exclusion made from the page fits a revision that names its reason and
// links back, while the original is marked superseded, links to the
// revision and offers no review form.
func TestUICurvePageShowsWhatTheReviewerDecidesOn(t *testing.T) {
	e := newUIEnv(t, false)
	id := postContextRun(t, e)

	b := e.browser(t)
	b.mustSignIn(e.tokens[lab.ScopeCurvesReview])
	p := b.get("/ui/curves/" + id)
	for _, want := range []string{
		`id="weighting"`, "Why this weighting", "✓ chosen", "Σ|%RE|",
		`id="standards"`, "Weight (% of total)", "✓ within ±15 %", "±20 %",
		"analyst-ines",
		`id="samples"`, "PB-W-17", "st-provisional",
		`id="verifications"`, "continuing CCV-1", "✗ Fail", "withholds the samples after it",
		`id="previous"`, "Slope", "Change",
		`id="exclude-form"`,
	} {
		if !strings.Contains(p.body, want) {
			t.Errorf("curve page lacks %q", want)
		}
	}
	if strings.Contains(p.body, `id="superseded"`) {
		t.Error("a current curve is marked superseded")
	}

	// Exclude a reading from the page: a revision, which names its reason and
	// its original; the original is superseded and offers no review form.
	token := p.csrf(t)
	if r := b.post("/ui/curves/"+id+"/exclusions", url.Values{"csrf_token": {token}, "reason": {"x"}}); r.status != http.StatusUnprocessableEntity ||
		!strings.Contains(r.body, "Choose the readings to exclude") {
		t.Errorf("exclusion without readings: %d", r.status)
	}
	r := b.post("/ui/curves/"+id+"/exclusions", url.Values{"csrf_token": {token}, "point": {"Pb-3#2"}, "reason": {"bubble in the Pb-3 replicate 2 injection"}})
	if r.status != http.StatusSeeOther {
		t.Fatalf("exclusion: %d %s", r.status, r.body)
	}
	rev := b.get(r.header.Get("Location"))
	for _, want := range []string{`id="revision-of"`, "bubble in the Pb-3 replicate 2 injection", "/ui/curves/" + id, "The readings were excluded"} {
		if !strings.Contains(rev.body, want) {
			t.Errorf("revision page lacks %q", want)
		}
	}
	orig := b.get("/ui/curves/" + id)
	for _, want := range []string{`id="superseded"`, "cannot be approved"} {
		if !strings.Contains(orig.body, want) {
			t.Errorf("superseded page lacks %q", want)
		}
	}
	for _, unwanted := range []string{`id="review-form"`, `id="sign-form"`, `id="exclude-form"`} {
		if strings.Contains(orig.body, unwanted) {
			t.Errorf("superseded page still offers %s", unwanted)
		}
	}
}

// postContextRun posts, on the fixture's instrument after its history, a
// clean Pb run with an operator and a sample, and a failing continuing
// verification standard against its curve; it returns the curve's id.
func postContextRun(t *testing.T, e *uiEnv) string {
	t.Helper()
	var run struct {
		Curves []struct{ ID string } `json:"curves"`
	}
	at := uiStart.AddDate(0, 0, uiDays+1)
	stds := uiPbStandards()
	e.api(t, e.tokens[lab.ScopeRunsWrite], http.MethodPost, "/v1/runs", map[string]any{
		"method": uiMethod, "instrument": uiInstrument, "acquired_at": at.Format(time.RFC3339), "operator": "analyst-ines",
		"standards": stds, "samples": []map[string]any{{"id": "PB-W-17", "analyte": "Pb", "responses": []float64{9000, 9010}}},
	}, http.StatusCreated, &run)
	id := run.Curves[0].ID
	e.api(t, e.tokens[lab.ScopeCurvesReview], http.MethodPost, "/v1/curves/"+id+"/verifications", map[string]any{
		"kind": "continuing", "level": "CCV-1", "concentration": 10, "responses": []float64{40 + uiSlope(uiDays)*10*1.4},
		"acquired_at": at.Add(time.Hour).Format(time.RFC3339)}, http.StatusCreated, nil)

	return id
}
