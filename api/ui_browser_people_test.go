package api_test

// The browser test of a person's signature on the QA pages: a person signs
// in with login and password, approves the failing curve with a reason and
// the password again, reads the signature's printed name, time and meaning
// on the page, and is refused when approving a run the person posted.
// Screenshots at a desktop width (1400 px) and a phone width (390 px).

import (
	"net/http"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

func TestBrowserPersonSignsCurve(t *testing.T) {
	b := newChrome(t)
	e := newUIEnv(t, false)
	// pat posts runs and approves them: analyst and QA approver.
	e.api(t, e.admin, http.MethodPost, "/v1/people", map[string]any{"login": "pat", "full_name": "Pat Okafor-Lind",
		"roles": []string{"analyst", "qa-approver"}, "password": "pat-password-1"}, http.StatusCreated, nil)
	var tok struct {
		Token string `json:"token"`
	}
	e.api(t, e.admin, http.MethodPost, "/v1/tokens", map[string]any{"name": "pat-uploads", "scopes": []string{"runs:write"},
		"owner": "person:pat", "instruments": []string{uiInstrument}}, http.StatusCreated, &tok)
	own := e.postRunAs(t, tok.Token, uiStart.AddDate(0, 0, uiDays).Add(5*time.Hour), uiSlope(uiDays), []float64{0.5, 1, 2, 5, 10, 20, 50})

	// 1. Sign in as a person.
	b.do("sign-in page", chromedp.EmulateViewport(1400, 900), chromedp.Navigate(e.srv.URL+"/ui/curves/"+e.failing),
		chromedp.WaitVisible(chromedp.ID("login")))
	b.do("sign in",
		chromedp.SendKeys(chromedp.ID("login"), "pat"),
		chromedp.SendKeys(chromedp.ID("password"), "pat-password-1"),
		chromedp.Click(chromedp.CSS(`#person-sign-in button[type="submit"]`)),
		chromedp.WaitVisible(chromedp.ID("sign-form")),
	)
	if got := b.text(".signout .who"); !strings.Contains(got, "Pat Okafor-Lind") || !strings.Contains(got, "pat") {
		t.Errorf("signed in as %q, want the printed name and login", got)
	}
	if n, err := chromedp.Run(b.ctx, chromedp.Nodes(chromedp.ID("review-form"), chromedp.AtLeast(0))); err != nil || len(n) != 0 {
		t.Errorf("a person's session shows the unsigned review form (%d, %v)", len(n), err)
	}

	// 2. Approve the failing curve with a reason and the password again.
	const reason = "Four levels cover the reporting range of this batch; SOP-ICP-07 §5.2 deviation DV-118."
	b.do("sign the approval",
		chromedp.Click(chromedp.ID("m-approval")),
		chromedp.Click(chromedp.ID("s-approve")),
		chromedp.SendKeys(chromedp.ID("sign-reason"), reason),
		chromedp.SendKeys(chromedp.ID("sign-password"), "pat-password-1"),
		chromedp.Click(chromedp.ID("sign-button")),
		chromedp.WaitVisible(chromedp.CSS("#signatures-h ~ .notice.good")),
	)
	list := b.text("#signature-list")
	manifest := regexp.MustCompile(`Pat Okafor-Lind — approval — \d{4}-\d\d-\d\d \d\d:\d\d:\d\d UTC \(\d{4}-\d\d-\d\d \d\d:\d\d:\d\d UTC\)`)
	if !manifest.MatchString(list) || !strings.Contains(list, "decision: approve") || !strings.Contains(list, reason) ||
		!regexp.MustCompile(`signed content SHA-256 [0-9a-f]{64} — matches the record as it stands`).MatchString(list) {
		t.Errorf("the signature reads %q; want the printed name, meaning, UTC and lab time, decision, reason and content hash", list)
	}
	if got := b.text("#review-h + p"); !strings.Contains(got, "Approved by person:pat") {
		t.Errorf("the review section reads %q", got)
	}
	b.do("scroll to the signatures", chromedp.ScrollIntoView(chromedp.ID("signatures-h")))
	b.shot("p1-signed-1400")
	b.do("phone width", chromedp.EmulateViewport(390, 844, chromedp.EmulateScale(2)))
	b.phoneFits()
	b.shot("p2-signed-390")

	// 3. The same person approving a run they posted is refused.
	b.do("own run", chromedp.EmulateViewport(1400, 900), chromedp.Navigate(e.srv.URL+"/ui/curves/"+own),
		chromedp.WaitVisible(chromedp.ID("sign-form")))
	b.do("sign own run",
		chromedp.Click(chromedp.ID("m-approval")),
		chromedp.Click(chromedp.ID("s-approve")),
		chromedp.SendKeys(chromedp.ID("sign-password"), "pat-password-1"),
		chromedp.Click(chromedp.ID("sign-button")),
		chromedp.WaitVisible(chromedp.CSS("#signatures-h ~ .notice.bad")),
	)
	if got := b.text("#signatures-h ~ .notice.bad"); !strings.Contains(got, "second-person review") || !strings.Contains(got, "pat posted this record") {
		t.Errorf("the refusal reads %q; want the second-person rule", got)
	}
	if got := b.text("#review-h ~ .notice"); !strings.Contains(got, "awaits review") {
		t.Errorf("after the refusal the review section reads %q", got)
	}
	b.shot("p3-own-run-refused-1400")
	b.do("phone width", chromedp.EmulateViewport(390, 844, chromedp.EmulateScale(2)))
	b.phoneFits()
	b.shot("p4-own-run-refused-390")
}

// phoneFits fails the test when the page is wider than a 390 px phone
// screen (a wide table must scroll inside its box).
func (b *chrome) phoneFits() {
	b.t.Helper()
	w, err := chromedp.Run(b.ctx, chromedp.Evaluate[int]("document.documentElement.scrollWidth"))
	if err != nil {
		b.t.Fatal(err)
	}
	if w > 390 {
		wide, _ := chromedp.Run(b.ctx, chromedp.Evaluate[[]string](`[...document.querySelectorAll("body *")]
  .filter(e => !(e.parentElement && e.parentElement.closest("table.grid")) && e.getBoundingClientRect().right > 391)
  .slice(0, 5).map(e => e.tagName + "." + e.className + " " + Math.round(e.getBoundingClientRect().right))`))
		b.t.Errorf("at 390 px the page is %d px wide; widest elements: %v", w, wide)
	}
}
