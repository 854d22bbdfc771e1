package api_test

import (
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"curvekeeper/lab"
)

// postBudgetRun defines a Pb method whose results carry a budget
// (calibration, the run's certified material, repeatability) and an upper
// limit under the guard band, records the material and posts a run with a
// sample; it returns the curve's id.
func postBudgetRun(t *testing.T, e *uiEnv) string {
	t.Helper()
	e.api(t, e.admin, http.MethodPost, "/v1/methods", map[string]any{
		"name": "fen-metals-budget", "model": "linear", "weighting": "1/x^2",
		"analytes": []map[string]any{{"name": "Pb", "unit": "ug/L", "uncertainty": map[string]any{
			"terms":  []string{"calibration", "standards", "repeatability"},
			"limits": map[string]any{"upper": 10.0, "rule": "guard_band_u"}}}},
	}, http.StatusCreated, nil)
	at := uiStart.AddDate(0, 0, uiDays+1)
	e.api(t, e.admin, http.MethodPost, "/v1/standard-materials", map[string]any{
		"code": "CRM-PB-7", "kind": "reference_material", "analyte": "Pb", "unit": "ug/L", "value": 1000.0,
		"expanded_uncertainty": 5.0, "coverage_factor": 2.0, "lot": "PB-0031", "supplier": "invented supplier",
		"expires_at": at.AddDate(1, 0, 0).Format(time.RFC3339)}, http.StatusCreated, nil)
	var run struct {
		Curves []struct{ ID string } `json:"curves"`
	}
	stds := uiPbStandards()
	y9 := 40 + uiSlope(uiDays)*9.6
	e.api(t, e.tokens[lab.ScopeRunsWrite], http.MethodPost, "/v1/runs", map[string]any{
		"method": "fen-metals-budget", "instrument": "fen-icpms-4", "acquired_at": at.Format(time.RFC3339), "operator": "analyst-ines",
		"standards": stds, "standard_materials": []string{"CRM-PB-7"},
		"samples": []map[string]any{{"id": "PB-W-21", "analyte": "Pb", "responses": []float64{y9 * 1.01, y9 * 0.99, y9}}},
	}, http.StatusCreated, &run)
	return run.Curves[0].ID
}

// TestUICurvePageShowsResultBudget: under each sample with a budget the
// curve page shows the budget table (each term with its share, u_c, ν_eff,
// k, U) and the conformity statement naming the rule, the limit and the
// risk.
func TestUICurvePageShowsResultBudget(t *testing.T) {
	e := newUIEnv(t, false)
	id := postBudgetRun(t, e)
	b := e.browser(t)
	b.mustSignIn(e.tokens[lab.ScopeCurvesReview])
	p := b.get("/ui/curves/" + id)
	for _, want := range []string{
		`class="grid compact budget-table"`, "PB-W-21", "Uncertainty budget (bottom_up", "calibration: s(x̂0) from the curve",
		"standards: CRM-PB-7", "repeatability of the sample", "Share (%)", "u_c = ", "ν_eff = ", "k = ",
		"Conformity (guard_band_u)", "upper limit 10 ug/L", "under guard band w = U", "conf-", "the chance that the true value lies outside",
	} {
		if !strings.Contains(p.body, want) {
			t.Errorf("curve page lacks %q", want)
		}
	}
}

// TestBrowserResultBudget opens the curve page in headless Chromium at
// 1400 and 390 px, opens a sample's budget, checks the budget table and the
// conformity statement are visible and that the page is no wider than the
// window, and saves a screenshot at each width.
func TestBrowserResultBudget(t *testing.T) {
	b := newChrome(t)
	e := newUIEnv(t, false)
	id := postBudgetRun(t, e)
	b.signInWithToken(e.srv.URL, e.tokens[lab.ScopeCurvesReview])
	for _, width := range []int64{1400, 390} {
		b.do("open the budget", chromedp.EmulateViewport(width, 900), chromedp.Navigate(e.srv.URL+"/ui/curves/"+id),
			chromedp.WaitVisible(chromedp.ID("samples")), chromedp.Click(chromedp.CSS(`details.budget summary`)),
			chromedp.WaitVisible(chromedp.CSS(`table.budget-table`)), chromedp.ScrollIntoView(chromedp.CSS(`details.budget`)))
		text := b.text(`details.budget`)
		for _, want := range []string{"standards: CRM-PB-7", "Combined", "Conformity (guard_band_u)", "upper limit 10 ug/L"} {
			if !strings.Contains(text, want) {
				t.Errorf("%d px: the open budget does not show %q: %q", width, want, text)
			}
		}
		name := map[int64]string{1400: "result-budget-1400px", 390: "result-budget-phone-390px"}[width]
		b.fitsWindow(name)
		b.shot(name)
		// The samples section alone, with the budget open, for a reviewer
		// of the page (the full page is long).
		b.shotOf(`#samples`, name+"-samples")
	}
}

// TestUICurvePageShowsReportedInterval posts an invented run whose slope is
// weakly determined (Fieller's g about 0.2) under a method with the default
// Monte Carlo setting: the curve page's budget says the Monte Carlo check
// ran by itself, with its draws and seed, and that the result reports the
// Monte Carlo interval, y ± U beside it.
func TestUICurvePageShowsReportedInterval(t *testing.T) {
	e := newUIEnv(t, false)
	e.api(t, e.admin, http.MethodPost, "/v1/methods", map[string]any{
		"name": "fen-weak-budget", "model": "linear", "weighting": "none",
		"analytes": []map[string]any{{"name": "Pb", "unit": "ug/L", "uncertainty": map[string]any{
			"terms": []string{"calibration"}, "limits": map[string]any{"upper": 5.0, "rule": "guard_band_u"}}}},
	}, http.StatusCreated, nil)
	var run struct {
		Curves []struct{ ID string } `json:"curves"`
	}
	resp := [][]float64{{0.108, 0.101}, {0.103, 0.114}, {0.114, 0.108}, {0.121, 0.114}, {0.114, 0.123}, {0.125, 0.123}}
	var stds []map[string]any
	for i, r := range resp {
		stds = append(stds, map[string]any{"analyte": "Pb", "level": "Pb-" + string(rune('1'+i)), "concentration": float64(i + 1), "responses": r})
	}
	e.api(t, e.tokens[lab.ScopeRunsWrite], http.MethodPost, "/v1/runs", map[string]any{
		"method": "fen-weak-budget", "instrument": "fen-icpms-4", "acquired_at": uiStart.AddDate(0, 0, uiDays+1).Format(time.RFC3339),
		"operator": "analyst-ines", "standards": stds,
		"samples": []map[string]any{{"id": "PB-W-22", "analyte": "Pb", "responses": []float64{0.108, 0.109}}},
	}, http.StatusCreated, &run)
	b := e.browser(t)
	b.mustSignIn(e.tokens[lab.ScopeCurvesReview])
	p := b.get("/ui/curves/" + run.Curves[0].ID)
	for _, want := range []string{
		"Monte Carlo check (JCGM 101, run by itself: the slope is weakly determined", "200000 draws, seed ",
		"Reported interval: Monte Carlo", ", Monte Carlo interval ", "beside y ± U = ", "Monte Carlo 95 % coverage interval",
	} {
		if !strings.Contains(p.body, want) {
			t.Errorf("curve page lacks %q", want)
		}
	}
}
