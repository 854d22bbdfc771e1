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

// chrome is one headless Chromium tab of a browser test, with its
// screenshot folder.
type chrome struct {
	t   *testing.T
	ctx context.Context
	dir string
}

// newChrome starts Chromium for t (skipping when it is not installed,
// failing under CI=true) with screenshots going to
// $CURVEKEEPER_ARTIFACTS/browser (or a temporary folder).
func newChrome(t *testing.T) *chrome {
	t.Helper()
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
	t.Cleanup(cancelAlloc)
	// A bound, not a measurement: a wedged browser must not hang the suite.
	ctx, cancel := context.WithTimeout(alloc, 3*time.Minute)
	t.Cleanup(cancel)
	ctx, cancelTab := chromedp.NewContext(ctx)
	t.Cleanup(cancelTab)
	return &chrome{t: t, ctx: ctx, dir: dir}
}

// shot saves a full-page screenshot as name.png.
func (b *chrome) shot(name string) {
	b.t.Helper()
	png, err := chromedp.Run(b.ctx, chromedp.FullScreenshot(100))
	if err != nil {
		b.t.Fatalf("screenshot %s: %v", name, err)
	}
	if err := os.WriteFile(filepath.Join(b.dir, name+".png"), png, 0o644); err != nil {
		b.t.Fatal(err)
	}
}

// do runs actions, failing the test at step when one fails.
func (b *chrome) do(step string, actions ...chromedp.Action[chromedp.Void]) {
	b.t.Helper()
	if err := chromedp.Do(b.ctx, actions...); err != nil {
		b.t.Fatalf("%s: %v", step, err)
	}
}

// text is the visible text of the first element matching sel.
func (b *chrome) text(sel string) string {
	b.t.Helper()
	s, err := chromedp.Run(b.ctx, chromedp.Text(chromedp.CSS(sel), chromedp.NodeVisible))
	if err != nil {
		b.t.Fatalf("read %s: %v", sel, err)
	}
	return s
}

// signInWithToken signs in at base with an API token, through the token
// form kept one click away from the person's, at 1400 px.
func (b *chrome) signInWithToken(base, token string) {
	b.t.Helper()
	b.do("sign in", chromedp.EmulateViewport(1400, 900), chromedp.Navigate(base+"/ui/sign-in"),
		chromedp.Click(chromedp.CSS(`#token-sign-in summary`)), chromedp.WaitVisible(chromedp.ID("token")),
		chromedp.SendKeys(chromedp.ID("token"), token),
		chromedp.Click(chromedp.CSS(`#token-sign-in button[type="submit"]`)), chromedp.WaitVisible(chromedp.ID("curve-list")))
}

// fitsWindow fails the test when the page is wider than the window (a wide
// table must scroll inside its own box); what names the view.
func (b *chrome) fitsWindow(what string) {
	b.t.Helper()
	overflow, err := chromedp.Run(b.ctx, chromedp.Evaluate[float64](`document.body.scrollWidth - window.innerWidth`))
	if err != nil {
		b.t.Fatal(err)
	}
	if overflow > 0 {
		b.t.Errorf("%s: the page is %v px wider than the window", what, overflow)
	}
}

// shotOf saves a screenshot of the first element matching sel as name.png.
func (b *chrome) shotOf(sel, name string) {
	b.t.Helper()
	png, err := chromedp.Run(b.ctx, chromedp.Screenshot(chromedp.CSS(sel), chromedp.NodeVisible))
	if err != nil {
		b.t.Fatalf("screenshot %s of %s: %v", name, sel, err)
	}
	if err := os.WriteFile(filepath.Join(b.dir, name+".png"), png, 0o644); err != nil {
		b.t.Fatal(err)
	}
}

// location is the tab's URL.
func (b *chrome) location() string {
	b.t.Helper()
	u, err := chromedp.Run(b.ctx, chromedp.Location())
	if err != nil {
		b.t.Fatal(err)
	}
	return u
}

func TestBrowserReviewFlow(t *testing.T) {
	b := newChrome(t)
	e := newUIEnv(t, false)
	ctx, dir, shot, do, text, location := b.ctx, b.dir, b.shot, b.do, b.text, b.location

	// 1. A page of the service sends a visitor to the sign-in form.
	do("open the list", chromedp.EmulateViewport(1280, 900), chromedp.Navigate(e.srv.URL+"/ui/curves"), chromedp.WaitVisible(chromedp.ID("login")))
	if u := location(); !strings.Contains(u, "/ui/sign-in") {
		t.Fatalf("signed out, the list went to %s, not the sign-in page", u)
	}
	shot("01-sign-in")
	// The token sign-in is kept, one click away from the person's.
	do("sign in",
		chromedp.Click(chromedp.CSS(`#token-sign-in summary`)),
		chromedp.WaitVisible(chromedp.ID("token")),
		chromedp.SendKeys(chromedp.ID("token"), e.tokens[lab.ScopeCurvesReview]),
		chromedp.Click(chromedp.CSS(`#token-sign-in button[type="submit"]`)),
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
