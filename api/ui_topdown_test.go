package api_test

import (
	"fmt"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"curvekeeper/lab"
)

// postTopDownRun defines a Pb method whose U is the larger of the budget
// and the top-down estimate from the QC history, posts a run, six
// verifications against its curve (two of them on a reference material),
// and then a sample, whose stored budget takes the history. It returns the
// curve's id.
func postTopDownRun(t *testing.T, e *uiEnv) string {
	t.Helper()
	e.api(t, e.admin, http.MethodPost, "/v1/methods", map[string]any{
		"name": "fen-metals-td", "model": "linear", "weighting": "1/x^2",
		"analytes": []map[string]any{{"name": "Pb", "unit": "ug/L", "uncertainty": map[string]any{
			"terms": []string{"calibration", "repeatability"}, "approach": "larger", "top_down_source": "history"}}},
	}, http.StatusCreated, nil)
	at := uiStart.AddDate(0, 0, uiDays+2)
	e.api(t, e.admin, http.MethodPost, "/v1/standard-materials", map[string]any{
		"code": "CRM-PB-TD", "kind": "reference_material", "analyte": "Pb", "unit": "ug/L", "value": 5.0,
		"expanded_uncertainty": 0.1, "coverage_factor": 2.0, "lot": "PB-0107", "supplier": "invented supplier",
		"expires_at": at.AddDate(2, 0, 0).Format(time.RFC3339)}, http.StatusCreated, nil)
	var run struct {
		ID     string                `json:"id"`
		Curves []struct{ ID string } `json:"curves"`
	}
	stds := uiPbStandards()
	e.api(t, e.tokens[lab.ScopeRunsWrite], http.MethodPost, "/v1/runs", map[string]any{
		"method": "fen-metals-td", "instrument": "fen-icpms-4", "acquired_at": at.Format(time.RFC3339), "operator": "analyst-ines",
		"standards": stds}, http.StatusCreated, &run)
	id := run.Curves[0].ID
	for i, v := range []struct {
		found    float64
		material string
	}{{4.9, ""}, {5.15, ""}, {5.05, "CRM-PB-TD"}, {4.85, ""}, {5.1, ""}, {4.95, "CRM-PB-TD"}} {
		b := map[string]any{"kind": "continuing", "level": "CCV-5", "concentration": 5.0,
			"responses": []float64{40 + uiSlope(uiDays)*v.found}, "acquired_at": at.Add(time.Duration(i+1) * time.Hour).Format(time.RFC3339)}
		if v.material != "" {
			b["material"] = v.material
		}
		e.api(t, e.tokens[lab.ScopeRunsWrite], http.MethodPost, "/v1/curves/"+id+"/verifications", b, http.StatusCreated, nil)
	}
	y := 40 + uiSlope(uiDays)*7.3
	e.api(t, e.tokens[lab.ScopeRunsWrite], http.MethodPost, "/v1/runs/"+run.ID+"/samples", map[string]any{"samples": []map[string]any{{
		"id": "PB-W-40", "analyte": "Pb", "responses": []float64{y * 1.01, y * 0.99, y}, "acquired_at": at.Add(8 * time.Hour).Format(time.RFC3339)}}},
		http.StatusCreated, nil)
	return id
}

// TestBrowserTopDownFromHistory looks at the curve page's top-down section
// and the result's budget that took it, wide and on a phone.
func TestBrowserTopDownFromHistory(t *testing.T) {
	b := newChrome(t)
	e := newUIEnv(t, false)
	id := postTopDownRun(t, e)
	b.signInWithToken(e.srv.URL, e.tokens[lab.ScopeCurvesReview])
	for _, width := range []int64{1400, 390} {
		b.do("open the top-down data", chromedp.EmulateViewport(width, 900), chromedp.Navigate(e.srv.URL+"/ui/curves/"+id),
			chromedp.WaitVisible(chromedp.ID("topdown")), chromedp.Click(chromedp.CSS(`#topdown ~ details summary`)),
			chromedp.WaitVisible(chromedp.ID("topdown-data")), chromedp.Click(chromedp.CSS(`#samples details.budget summary`)))
		text := b.text(`section[aria-labelledby="topdown-h"]`)
		for _, want := range []string{"u(Rw), SD of 6 recoveries", "RMS bias over 2 reference-material results", "U = 2·u_c (k = 2)",
			"CRM-PB-TD", "2031-05-23", "a qualified person reviews"} {
			if !strings.Contains(text, want) {
				t.Errorf("%d px: the top-down section does not show %q: %q", width, want, text)
			}
		}
		if got := strings.Count(b.text(`#topdown-data tbody`), "CCV-5"); got != 6 {
			t.Errorf("%d px: the data table lists %d verifications, want 6", width, got)
		}
		if budget := b.text(`#samples details.budget`); !strings.Contains(budget, "from the QC history of 6 recoveries and 2 reference-material results") {
			t.Errorf("%d px: the result's budget does not name the history it took: %q", width, budget)
		}
		// U is the top-down one here: the footer must not read as the sum of
		// the bottom-up terms listed above it.
		if foot := b.text(`#samples details.budget tfoot`); !strings.Contains(foot, "Reported (top-down)") || !strings.Contains(foot, "shown for reference") {
			t.Errorf("%d px: the budget's footer does not say U is the top-down estimate: %q", width, foot)
		}
		name := fmt.Sprintf("topdown-%dpx", width)
		b.fitsWindow(name)
		b.shot(name)
		b.shotOf(`section[aria-labelledby="topdown-h"]`, name+"-section")
		b.shotOf(`#samples`, name+"-samples")
	}
}
