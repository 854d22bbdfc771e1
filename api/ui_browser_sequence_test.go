package api_test

import (
	"fmt"
	"net/http"
	"strings"
	"testing"

	"github.com/chromedp/chromedp"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// postSequenceRun posts an internal-standard run whose sequence has a
// failing mid-batch CCV (the case of
// TestSequenceFailingCCVWithholdsSinceLastPassing, with IS responses and a
// method blank): standards at 1–6, the ICV at 7, S1 S2, CCV1 at 10 (100 %),
// S3 S4, CCV2 at 13 (120 %: fails), S5, CCV3 at 15, S6, CCV4 at 17. It
// returns the curve's id.
func postSequenceRun(t *testing.T, e *uiEnv) string {
	t.Helper()
	e.api(t, e.admin, http.MethodPost, "/v1/methods", map[string]any{"name": "lcms-seq", "model": "linear", "weighting": "none",
		"analytes": []map[string]any{{"name": "drug-a", "unit": "ng/mL", "quant": map[string]any{"internal_standard": "drug-a-d4", "reporting_limit": 0.5}}}},
		http.StatusCreated, nil)
	var standards, injections []map[string]any
	at := func(pos int) string { return fmt.Sprintf("2026-03-06T09:%02d:00Z", 3*pos) }
	for i, c := range []float64{1, 2, 4, 8, 16, 32} {
		lv := fmt.Sprintf("L%d", i+1)
		standards = append(standards, map[string]any{"analyte": "drug-a", "level": lv, "concentration": c,
			"responses": []float64{100 * c}, "is_responses": []float64{1000}})
		injections = append(injections, map[string]any{"position": i + 1, "kind": "calibration_standard", "id": lv, "time": at(i + 1)})
	}
	inj := func(pos int, kind, id string, resp float64) map[string]any {
		m := map[string]any{"position": pos, "kind": kind, "id": id, "time": at(pos)}
		if kind != "sample" {
			m["analyte"], m["responses"], m["is_responses"] = "drug-a", []float64{resp}, []float64{1000}
		}
		if kind == "icv" || kind == "ccv" {
			m["nominal"] = 5
		}
		return m
	}
	injections = append(injections, inj(7, "icv", "ICV", 500), inj(8, "sample", "S1", 0), inj(9, "sample", "S2", 0),
		inj(10, "ccv", "CCV1", 500), inj(11, "sample", "S3", 0), inj(12, "method_blank", "MB1", 2), inj(13, "ccv", "CCV2", 600),
		inj(14, "sample", "S5", 0), inj(15, "ccv", "CCV3", 500), inj(16, "sample", "S6", 0), inj(17, "ccv", "CCV4", 500))
	var samples []map[string]any
	for _, id := range []string{"S1", "S2", "S3", "S5", "S6"} {
		samples = append(samples, map[string]any{"id": id, "analyte": "drug-a", "responses": []float64{300}, "is_responses": []float64{1000}})
	}
	var run oapi.RunCreated
	e.api(t, e.admin, http.MethodPost, "/v1/runs", map[string]any{"method": "lcms-seq", "instrument": "lcms-1", "acquired_at": "2026-03-06T09:00:00Z",
		"standards": standards, "samples": samples, "sequence": map[string]any{"complete": true, "injections": injections}}, http.StatusCreated, &run)
	return run.Curves[0].ID.String()
}

// The curve page's sequence section lists every injection in order, each
// sample with the check before and after it: S3, since the last passing
// CCV1, is withheld with CCV2 (failed) after it; S1 is bracketed by the
// passing ICV and CCV1.
func TestUISequenceSection(t *testing.T) {
	e := newUIEnv(t, false)
	id := postSequenceRun(t, e)
	b := e.browser(t)
	b.mustSignIn(e.tokens[lab.ScopeCurvesReview])
	p := b.get("/ui/curves/" + id)
	if p.status != http.StatusOK {
		t.Fatalf("curve page: %d", p.status)
	}
	i := strings.Index(p.body, `id="sequence"`)
	if i < 0 {
		t.Fatal("the curve page has no sequence table")
	}
	body := p.body[i:]
	body = body[:strings.Index(body, "</table>")]
	if n := strings.Count(body, "<tr"); n != 18 { // the header and 17 injections
		t.Errorf("%d rows, want the header and 17 injections", n)
	}
	for _, want := range []string{
		`<th scope="row">sample S1</th>`, "ICV at 7: passed</td><td>CCV CCV1 at 10: passed",
		`<th scope="row">sample S3</th>`, "withheld", "CCV CCV1 at 10: passed</td><td>CCV CCV2 at 13: failed",
		`<th scope="row">method blank MB1</th>`, `<th scope="row">calibration standard L6</th>`} {
		if !strings.Contains(body, want) {
			t.Errorf("sequence table lacks %q in %s", want, body)
		}
	}
	if s1, s3 := strings.Index(body, "sample S1"), strings.Index(body, "sample S3"); s1 < 0 || s3 < s1 {
		t.Error("the rows are not in injection order")
	}
}

// TestBrowserSequencePage opens the curve page of a run with a failing
// mid-batch CCV in headless Chromium at 1400 px, checks that the sequence
// table is visible and says which samples the failing CCV withheld, and
// saves a screenshot to $CURVEKEEPER_ARTIFACTS/browser (or a temporary
// folder).
func TestBrowserSequencePage(t *testing.T) {
	b := newChrome(t)
	e := newUIEnv(t, false)
	id := postSequenceRun(t, e)
	b.signInWithToken(e.srv.URL, e.tokens[lab.ScopeCurvesReview])
	b.do("open the curve", chromedp.Navigate(e.srv.URL+"/ui/curves/"+id), chromedp.WaitVisible(chromedp.ID("sequence")),
		chromedp.ScrollIntoView(chromedp.ID("sequence-h")))
	text := b.text("#sequence")
	for _, want := range []string{"sample S3", "CCV CCV2 at 13: failed", "withheld", "calibration standard L1"} {
		if !strings.Contains(text, want) {
			t.Errorf("the visible sequence table lacks %q", want)
		}
	}
	b.fitsWindow("1400 px")
	b.shot("sequence-1400px")
	// A crop of the section itself, to look at.
	b.shotOf(`section[aria-labelledby="sequence-h"]`, "sequence-section-1400px")
}
