package api_test

import (
	"context"
	"net/http"
	"os"
	"path/filepath"
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
	var stds []map[string]any
	for i, x := range []float64{0.5, 1, 2, 5, 10, 20, 50} {
		y := 40 + uiSlope(uiDays)*x
		stds = append(stds, map[string]any{"analyte": "Pb", "level": "Pb-" + string(rune('1'+i)), "concentration": x,
			"responses": []float64{y * 1.004, y * 0.997}})
	}
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
	if _, err := os.Stat(chromiumPath); err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("%s is missing in CI (install the Debian package chromium): %v", chromiumPath, err)
		}
		t.Skipf("%s is not installed (apt-get install chromium); the browser test needs it", chromiumPath)
	}
	dir := os.Getenv("CURVEKEEPER_ARTIFACTS")
	if dir == "" {
		dir = t.TempDir()
	}
	dir = filepath.Join(dir, "browser")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	e := newUIEnv(t, false)
	id := postBudgetRun(t, e)
	alloc, cancelAlloc := chromedp.NewExecAllocator(context.Background(),
		chromedp.ExecPath(chromiumPath), chromedp.Flag("headless", true), chromedp.Flag("no-sandbox", true),
		chromedp.Flag("disable-gpu", true), chromedp.Flag("no-first-run", true), chromedp.UserDataDir(t.TempDir()))
	defer cancelAlloc()
	ctx, cancel := context.WithTimeout(alloc, 3*time.Minute) // a bound, not a measurement
	defer cancel()
	ctx, cancelTab := chromedp.NewContext(ctx)
	defer cancelTab()
	do := func(step string, actions ...chromedp.Action[chromedp.Void]) {
		t.Helper()
		if err := chromedp.Do(ctx, actions...); err != nil {
			t.Fatalf("%s: %v", step, err)
		}
	}
	do("sign in", chromedp.EmulateViewport(1400, 900), chromedp.Navigate(e.srv.URL+"/ui/sign-in"),
		chromedp.Click(chromedp.CSS(`#token-sign-in summary`)), chromedp.WaitVisible(chromedp.ID("token")),
		chromedp.SendKeys(chromedp.ID("token"), e.tokens[lab.ScopeCurvesReview]),
		chromedp.Click(chromedp.CSS(`#token-sign-in button[type="submit"]`)), chromedp.WaitVisible(chromedp.ID("curve-list")))
	for _, width := range []int64{1400, 390} {
		do("open the budget", chromedp.EmulateViewport(width, 900), chromedp.Navigate(e.srv.URL+"/ui/curves/"+id),
			chromedp.WaitVisible(chromedp.ID("samples")), chromedp.Click(chromedp.CSS(`details.budget summary`)),
			chromedp.WaitVisible(chromedp.CSS(`table.budget-table`)), chromedp.ScrollIntoView(chromedp.CSS(`details.budget`)))
		text, err := chromedp.Run(ctx, chromedp.Text(chromedp.CSS(`details.budget`), chromedp.NodeVisible))
		if err != nil {
			t.Fatal(err)
		}
		for _, want := range []string{"standards: CRM-PB-7", "Combined", "Conformity (guard_band_u)", "upper limit 10 ug/L"} {
			if !strings.Contains(text, want) {
				t.Errorf("%d px: the open budget does not show %q: %q", width, want, text)
			}
		}
		overflow, err := chromedp.Run(ctx, chromedp.Evaluate[float64](`document.body.scrollWidth - window.innerWidth`))
		if err != nil {
			t.Fatal(err)
		}
		if overflow > 0 {
			t.Errorf("%d px: the page is %v px wider than the window", width, overflow)
		}
		png, err := chromedp.Run(ctx, chromedp.FullScreenshot(90))
		if err != nil {
			t.Fatal(err)
		}
		name := map[int64]string{1400: "result-budget-1400px", 390: "result-budget-phone-390px"}[width]
		if err := os.WriteFile(filepath.Join(dir, name+".png"), png, 0o644); err != nil {
			t.Fatal(err)
		}
		// The samples section alone, with the budget open, for a reviewer
		// of the page (the full page is long).
		part, err := chromedp.Run(ctx, chromedp.Screenshot(chromedp.CSS(`#samples`)))
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dir, name+"-samples.png"), part, 0o644); err != nil {
			t.Fatal(err)
		}
	}
}
