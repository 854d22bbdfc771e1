package api_test

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"curvekeeper/lab"
)

// TestBrowserCurveContext opens a curve page in headless Chromium at a
// desktop width (1400 px) and a phone's (390 px), checks that the parts a
// reviewer decides on are visible (why this weighting, standards against
// the rule, samples, verification standards, the previous curve), saves a
// screenshot at each width to $CURVEKEEPER_ARTIFACTS (or a temporary
// folder), then excludes a reading through the page's form and lands on the
// revision, which names its reason.
func TestBrowserCurveContext(t *testing.T) {
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
	id := postContextRun(t, e)
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
	shot := func(name string) {
		t.Helper()
		png, err := chromedp.Run(ctx, chromedp.FullScreenshot(90))
		if err != nil {
			t.Fatalf("screenshot %s: %v", name, err)
		}
		if err := os.WriteFile(filepath.Join(dir, name+".png"), png, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	do("sign in", chromedp.EmulateViewport(1400, 900), chromedp.Navigate(e.srv.URL+"/ui/sign-in"),
		chromedp.Click(chromedp.CSS(`#token-sign-in summary`)), chromedp.WaitVisible(chromedp.ID("token")),
		chromedp.SendKeys(chromedp.ID("token"), e.tokens[lab.ScopeCurvesReview]),
		chromedp.Click(chromedp.CSS(`#token-sign-in button[type="submit"]`)), chromedp.WaitVisible(chromedp.ID("curve-list")))
	for _, width := range []int64{1400, 390} {
		do("open the curve", chromedp.EmulateViewport(width, 900), chromedp.Navigate(e.srv.URL+"/ui/curves/"+id),
			chromedp.WaitVisible(chromedp.ID("weighting")))
		for _, sel := range []string{"#weighting", "#standards", "#samples", "#verifications", "#previous", "#exclude-form"} {
			if _, err := chromedp.Run(ctx, chromedp.Text(chromedp.CSS(sel), chromedp.NodeVisible)); err != nil {
				t.Errorf("%d px: %s is not visible: %v", width, sel, err)
			}
		}
		// Nothing wider than the window but the tables, which scroll in
		// their own box.
		overflow, err := chromedp.Run(ctx, chromedp.Evaluate[float64](`document.body.scrollWidth - window.innerWidth`))
		if err != nil {
			t.Fatal(err)
		}
		if overflow > 0 {
			t.Errorf("%d px: the page is %v px wider than the window", width, overflow)
		}
		shot("curve-context-" + map[int64]string{1400: "1400px", 390: "phone-390px"}[width])
	}
	do("exclude a reading", chromedp.EmulateViewport(1400, 900),
		chromedp.Click(chromedp.CSS(`input[name="point"][value="Pb-3#2"]`)),
		chromedp.SendKeys(chromedp.ID("exclude-reason"), "bubble in the Pb-3 replicate 2 injection"),
		chromedp.Click(chromedp.ID("exclude-button")), chromedp.WaitVisible(chromedp.ID("revision-of")))
	got, err := chromedp.Run(ctx, chromedp.Text(chromedp.ID("revision-of"), chromedp.NodeVisible))
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(got, "bubble in the Pb-3 replicate 2 injection") {
		t.Errorf("the revision's banner says %q", got)
	}
	shot("curve-revision-1400px")
}
