package api_test

import (
	"strings"
	"testing"

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
	b := newChrome(t)
	e := newUIEnv(t, false)
	id := postContextRun(t, e)
	b.signInWithToken(e.srv.URL, e.tokens[lab.ScopeCurvesReview])
	for _, width := range []int64{1400, 390} {
		b.do("open the curve", chromedp.EmulateViewport(width, 900), chromedp.Navigate(e.srv.URL+"/ui/curves/"+id),
			chromedp.WaitVisible(chromedp.ID("weighting")))
		for _, sel := range []string{"#weighting", "#standards", "#samples", "#verifications", "#previous", "#exclude-form"} {
			if _, err := chromedp.Run(b.ctx, chromedp.Text(chromedp.CSS(sel), chromedp.NodeVisible)); err != nil {
				t.Errorf("%d px: %s is not visible: %v", width, sel, err)
			}
		}
		name := map[int64]string{1400: "1400px", 390: "phone-390px"}[width]
		b.fitsWindow(name)
		b.shot("curve-context-" + name)
	}
	b.do("exclude a reading", chromedp.EmulateViewport(1400, 900),
		chromedp.Click(chromedp.CSS(`input[name="point"][value="Pb-3#2"]`)),
		chromedp.SendKeys(chromedp.ID("exclude-reason"), "bubble in the Pb-3 replicate 2 injection"),
		chromedp.Click(chromedp.ID("exclude-button")), chromedp.WaitVisible(chromedp.ID("revision-of")))
	if got := b.text("#revision-of"); !strings.Contains(got, "bubble in the Pb-3 replicate 2 injection") {
		t.Errorf("the revision's banner says %q", got)
	}
	b.shot("curve-revision-1400px")
}
