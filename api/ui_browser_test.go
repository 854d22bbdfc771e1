package api_test

// The end-to-end test of the QA pages in a real browser: headless Chromium,
// driven over the DevTools protocol with chromedp, against the real service
// (httptest over api.New) and a real PostgreSQL database loaded with the
// fixture's history and failing curve. It signs in, filters the list, opens
// the failing curve, reads the failed check, rejects the curve with a reason,
// reads the audit entry and opens the trend page, saving a screenshot of
// every step to $CURVEKEEPER_ARTIFACTS (or a temporary folder).

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

// chromiumPath is the Debian package chromium's browser.
const chromiumPath = "/usr/bin/chromium"

func TestBrowserReviewFlow(t *testing.T) {
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
	t.Logf("screenshots go to %s", dir)

	e := newUIEnv(t, false)
	alloc, cancelAlloc := chromedp.NewExecAllocator(context.Background(),
		chromedp.ExecPath(chromiumPath),
		chromedp.Flag("headless", true),
		chromedp.Flag("no-sandbox", true),
		chromedp.Flag("disable-gpu", true),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("no-first-run", true),
		chromedp.UserDataDir(t.TempDir()),
	)
	defer cancelAlloc()
	// A bound, not a measurement: a wedged browser must not hang the suite.
	ctx, cancel := context.WithTimeout(alloc, 3*time.Minute)
	defer cancel()
	ctx, cancelTab := chromedp.NewContext(ctx)
	defer cancelTab()

	shot := func(name string) {
		t.Helper()
		png, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
		if err != nil {
			t.Fatalf("screenshot %s: %v", name, err)
		}
		if err := os.WriteFile(filepath.Join(dir, name+".png"), png, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	do := func(step string, actions ...chromedp.Action[chromedp.Void]) {
		t.Helper()
		if err := chromedp.Do(ctx, actions...); err != nil {
			t.Fatalf("%s: %v", step, err)
		}
	}
	text := func(sel string) string {
		t.Helper()
		s, err := chromedp.Run(ctx, chromedp.Text(chromedp.CSS(sel), chromedp.NodeVisible))
		if err != nil {
			t.Fatalf("read %s: %v", sel, err)
		}
		return s
	}
	location := func() string {
		t.Helper()
		u, err := chromedp.Run(ctx, chromedp.Location())
		if err != nil {
			t.Fatal(err)
		}
		return u
	}

	// 1. A page of the service sends a visitor to the sign-in form.
	do("open the list", chromedp.EmulateViewport(1280, 900), chromedp.Navigate(e.srv.URL+"/ui/curves"), chromedp.WaitVisible(chromedp.ID("token")))
	if u := location(); !strings.Contains(u, "/ui/sign-in") {
		t.Fatalf("signed out, the list went to %s, not the sign-in page", u)
	}
	shot("01-sign-in")
	do("sign in",
		chromedp.SendKeys(chromedp.ID("token"), e.tokens[lab.ScopeCurvesReview]),
		chromedp.Click(chromedp.CSS(`form button[type="submit"].primary`)),
		chromedp.WaitVisible(chromedp.ID("curve-list")),
	)
	if got := text(".signout .who"); !strings.Contains(got, "fixture-curves-review") {
		t.Errorf("signed in as %q", got)
	}
	shot("02-curve-list")

	// 2. Filter: one instrument, failed curves, from the first day on.
	do("filter",
		chromedp.SendKeys(chromedp.ID("f-instrument"), uiInstrument),
		chromedp.SetValue(chromedp.ID("f-verdict"), "fail"),
		chromedp.SetValue(chromedp.ID("f-from"), uiStart.Format("2006-01-02")),
	)
	// The failing curve is on the unfiltered list too, so waiting for its
	// link alone could pass before the filtered page had loaded (it did on a
	// loaded machine); RunResponse waits for the navigation the click makes.
	if _, err := chromedp.RunResponse(ctx, chromedp.Click(chromedp.CSS(`form.filters button[type="submit"]`))); err != nil {
		t.Fatalf("submit the filter: %v", err)
	}
	do("filtered list", chromedp.WaitVisible(chromedp.CSS(`a[href="/ui/curves/`+e.failing+`"]`)))
	if u := location(); !strings.Contains(u, "verdict=fail") || !strings.Contains(u, "instrument="+uiInstrument) {
		t.Errorf("the filter form went to %s", u)
	}
	rows, err := chromedp.Run(ctx, chromedp.Nodes(chromedp.CSSAll("#curve-list tbody tr")))
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 1 {
		t.Errorf("the failed-curve filter lists %d curves, want 1", len(rows))
	}
	shot("03-filtered")

	// 3. Open the failing curve and read the failed check.
	do("open the failing curve",
		chromedp.Click(chromedp.CSS(`a[href="/ui/curves/`+e.failing+`"]`)),
		chromedp.WaitVisible(chromedp.ID("review-form")),
	)
	failed := text("#failed-h + ul")
	if !strings.Contains(failed, "min_levels") || !strings.Contains(failed, "4 non-zero concentration level(s)") {
		t.Errorf("the failed checks read %q; want min_levels with 4 levels", failed)
	}
	alt, err := chromedp.Run(ctx, chromedp.AttributeValue(chromedp.CSS("figure.plot img"), "alt"))
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(alt.Value, "Calibration curve for Pb") {
		t.Errorf("plot alt text %q", alt.Value)
	}
	shot("04-failing-curve")

	// 4. Reject it with a reason and see the audit entry.
	const reason = "Only four calibration levels; the method needs six. Rerun the calibration."
	do("reject",
		chromedp.Click(chromedp.ID("d-reject")),
		chromedp.SendKeys(chromedp.ID("reason"), reason),
		chromedp.Click(chromedp.CSS(`#review-form button[type="submit"]`)),
		chromedp.WaitVisible(chromedp.CSS(".notice.good")),
	)
	if got := text(".notice.good"); !strings.Contains(got, "rejected") {
		t.Errorf("after rejecting, the notice reads %q", got)
	}
	audit := text("#audit")
	if !strings.Contains(audit, "curve.review") || !strings.Contains(audit, reason) || !strings.Contains(audit, "decision: reject") {
		t.Errorf("the audit trail lacks the review entry:\n%s", audit)
	}
	shot("05-rejected-with-audit")

	// 5. The trend page of the instrument and analyte shows the drift.
	do("trend",
		chromedp.Navigate(e.srv.URL+"/ui/trends?instrument="+uiInstrument+"&analyte=Pb&baseline=10"),
		chromedp.WaitVisible(chromedp.ID("violations")),
	)
	if got := text("#violations"); !strings.Contains(got, "Reject") || !strings.Contains(got, "1-3s") {
		t.Errorf("the violations table reads %q", got)
	}
	shot("06-trend")
	entries, err := os.ReadDir(dir)
	if err != nil || len(entries) < 6 {
		t.Errorf("screenshots in %s: %d (%v)", dir, len(entries), err)
	}
}
