package api_test

import (
	"context"
	"html"
	"net/http"
	"net/url"
	"regexp"
	"strings"
	"testing"

	"curvekeeper/lab"
)

func findCookie(t *testing.T, h http.Header, name string) *http.Cookie {
	t.Helper()
	for _, c := range (&http.Response{Header: h}).Cookies() {
		if c.Name == name {
			return c
		}
	}
	t.Fatalf("no Set-Cookie %s in %q", name, h.Values("Set-Cookie"))
	return nil
}

func TestUISignIn(t *testing.T) {
	e := newUIEnv(t, false)
	t.Run("signed out, pages send you to sign in", func(t *testing.T) {
		p := e.browser(t).get("/ui/curves?verdict=fail")
		if p.status != http.StatusSeeOther || p.header.Get("Location") != "/ui/sign-in?next="+url.QueryEscape("/ui/curves?verdict=fail") {
			t.Errorf("got %d Location %q", p.status, p.header.Get("Location"))
		}
	})
	t.Run("cookie attributes and the session row", func(t *testing.T) {
		b := e.browser(t)
		p := b.signIn(e.tokens[lab.ScopeCurvesReview])
		if p.status != http.StatusSeeOther || p.header.Get("Location") != "/ui/curves" {
			t.Fatalf("sign in: %d %q", p.status, p.header.Get("Location"))
		}
		ck := findCookie(t, p.header, "ck_session")
		if !ck.HttpOnly || ck.SameSite != http.SameSiteStrictMode || ck.Secure || ck.Path != "/ui/" || ck.MaxAge <= 0 {
			t.Errorf("cookie %+v: want HttpOnly, SameSite=Strict, not Secure over plain HTTP, Path /ui/", ck)
		}
		var n, plain int
		ctx := context.Background()
		if err := e.db.Pool.QueryRow(ctx, `SELECT count(*) FROM ui_sessions WHERE id_hash = sha256($1::bytea)`, []byte(ck.Value)).Scan(&n); err != nil {
			t.Fatal(err)
		}
		if err := e.db.Pool.QueryRow(ctx, `SELECT count(*) FROM ui_sessions WHERE position($1::bytea in id_hash) > 0`, []byte(ck.Value)).Scan(&plain); err != nil {
			t.Fatal(err)
		}
		if n != 1 || plain != 0 {
			t.Errorf("sessions by hash %d (want 1), holding the secret %d (want 0)", n, plain)
		}
		list := b.get("/ui/curves")
		if list.status != http.StatusOK || !strings.Contains(list.body, "Signed in as") {
			t.Errorf("list after sign-in: %d", list.status)
		}
		for _, h := range []string{"Content-Security-Policy", "X-Content-Type-Options"} {
			if list.header.Get(h) == "" {
				t.Errorf("no %s header", h)
			}
		}
	})
	t.Run("a wrong token is refused", func(t *testing.T) {
		p := e.browser(t).signIn("ck_not-a-token-of-ours-at-all")
		if p.status != http.StatusUnauthorized || !strings.Contains(p.body, "unknown or revoked") {
			t.Errorf("got %d", p.status)
		}
	})
	t.Run("sign-in without its form token is refused", func(t *testing.T) {
		b := e.browser(t)
		b.get("/ui/sign-in")
		p := b.post("/ui/sign-in", url.Values{"token": {e.tokens[lab.ScopeCurvesReview]}})
		if p.status != http.StatusForbidden {
			t.Errorf("got %d, want 403", p.status)
		}
	})
	t.Run("sign-out ends the session, and needs the form token", func(t *testing.T) {
		b := e.browser(t)
		b.mustSignIn(e.tokens[lab.ScopeResultsRead])
		list := b.get("/ui/curves")
		if p := b.post("/ui/sign-out", url.Values{}); p.status != http.StatusForbidden {
			t.Errorf("sign-out without token: %d, want 403", p.status)
		}
		p := b.post("/ui/sign-out", url.Values{"csrf_token": {list.csrf(t)}})
		if p.status != http.StatusSeeOther {
			t.Fatalf("sign-out: %d", p.status)
		}
		if again := b.get("/ui/curves"); again.status != http.StatusSeeOther {
			t.Errorf("after sign-out the list answers %d, want a redirect to sign in", again.status)
		}
	})
}

func TestUISecureCookieOverTLS(t *testing.T) {
	e := newUIEnv(t, true)
	p := e.browser(t).signIn(e.tokens[lab.ScopeCurvesReview])
	if ck := findCookie(t, p.header, "ck_session"); !ck.Secure {
		t.Errorf("cookie over TLS is not Secure: %+v", ck)
	}
}

func TestUIScopes(t *testing.T) {
	e := newUIEnv(t, false)
	t.Run("an instrument token cannot read the pages", func(t *testing.T) {
		b := e.browser(t)
		b.mustSignIn(e.tokens[lab.ScopeRunsWrite])
		if p := b.get("/ui/curves"); p.status != http.StatusForbidden {
			t.Errorf("list: %d, want 403", p.status)
		}
	})
	t.Run("a reader sees the curve but no review form, and cannot post one", func(t *testing.T) {
		b := e.browser(t)
		b.mustSignIn(e.tokens[lab.ScopeResultsRead])
		p := b.get("/ui/curves/" + e.failing)
		if p.status != http.StatusOK {
			t.Fatalf("curve page: %d", p.status)
		}
		if strings.Contains(p.body, `id="review-form"`) || !strings.Contains(p.body, "does not hold the scope <code>curves:review</code>") {
			t.Error("the review form is shown to a token without curves:review")
		}
		r := b.post("/ui/curves/"+e.failing+"/review", url.Values{"csrf_token": {p.csrf(t)}, "decision": {"reject"}, "reason": {"no"}})
		if r.status != http.StatusForbidden {
			t.Errorf("review POST: %d, want 403", r.status)
		}
		c, err := e.db.GetCurve(context.Background(), e.failing)
		if err != nil || c.Status != lab.StatusPendingReview {
			t.Errorf("curve status %v (%v), want still pending", c.Status, err)
		}
	})
}

func TestUIReview(t *testing.T) {
	e := newUIEnv(t, false)
	b := e.browser(t)
	b.mustSignIn(e.tokens[lab.ScopeCurvesReview])
	path := "/ui/curves/" + e.failing
	p := b.get(path)
	for _, want := range []string{`id="review-form"`, "min_levels", "✗ Fail", "ICH M10", "%RE", `alt="Calibration curve for Pb`, "accreditation"} {
		if !strings.Contains(p.body, want) {
			t.Errorf("curve page lacks %q", want)
		}
	}
	token := p.csrf(t)
	t.Run("CSRF: no token, a wrong token, another session's token", func(t *testing.T) {
		other := e.browser(t)
		other.mustSignIn(e.tokens[lab.ScopeCurvesReview])
		otherToken := other.get(path).csrf(t)
		for name, tok := range map[string]string{"none": "", "wrong": "x" + token[1:], "other session": otherToken} {
			r := b.post(path+"/review", url.Values{"csrf_token": {tok}, "decision": {"reject"}, "reason": {"bad"}})
			if r.status != http.StatusForbidden {
				t.Errorf("%s: %d, want 403", name, r.status)
			}
		}
	})
	t.Run("the reason is required", func(t *testing.T) {
		r := b.post(path+"/review", url.Values{"csrf_token": {token}, "decision": {"reject"}, "reason": {"  "}})
		if r.status != http.StatusUnprocessableEntity || !strings.Contains(r.body, "Give the reason") {
			t.Errorf("got %d", r.status)
		}
	})
	t.Run("a reason with an invisible bidirectional control is refused", func(t *testing.T) {
		r := b.post(path+"/review", url.Values{"csrf_token": {token}, "decision": {"reject"}, "reason": {"levels \u202efine\u202c"}})
		if r.status != http.StatusUnprocessableEntity || !strings.Contains(r.body, "invisible bidirectional control U&#43;202E") {
			t.Errorf("got %d", r.status)
		}
	})
	t.Run("reject with a reason, see it in the audit trail", func(t *testing.T) {
		r := b.post(path+"/review", url.Values{"csrf_token": {token}, "decision": {"reject"}, "reason": {"only four levels: rerun the calibration"}})
		if r.status != http.StatusSeeOther {
			t.Fatalf("got %d: %s", r.status, r.body)
		}
		after := b.get(r.header.Get("Location"))
		for _, want := range []string{"The curve was rejected", "curve.review", "only four levels: rerun the calibration", "Rejected by token:fixture-curves-review"} {
			if !strings.Contains(after.body, want) {
				t.Errorf("page after review lacks %q", want)
			}
		}
		again := b.post(path+"/review", url.Values{"csrf_token": {token}, "decision": {"approve"}, "reason": {"again"}})
		if again.status != http.StatusConflict {
			t.Errorf("second review: %d, want 409", again.status)
		}
	})
}

func TestUICurveListAndTrend(t *testing.T) {
	e := newUIEnv(t, false)
	b := e.browser(t)
	b.mustSignIn(e.tokens[lab.ScopeCurvesReview])
	t.Run("filter by verdict", func(t *testing.T) {
		p := b.get("/ui/curves?instrument=" + uiInstrument + "&verdict=fail")
		if p.status != http.StatusOK || !strings.Contains(p.body, e.failing) || strings.Contains(p.body, e.curves[0]) {
			t.Errorf("verdict=fail: %d; failing curve listed %v, a passing one listed %v", p.status,
				strings.Contains(p.body, e.failing), strings.Contains(p.body, e.curves[0]))
		}
	})
	t.Run("date range and keyset pages", func(t *testing.T) {
		p := b.get("/ui/curves?instrument=" + uiInstrument + "&from=2031-05-05&to=2031-05-06")
		if n := strings.Count(p.body, `aria-label="Open curve`); n != 2 {
			t.Errorf("two days give %d curves, want 2", n)
		}
		first := b.get("/ui/curves?instrument=" + uiInstrument + "&limit=10")
		if n := strings.Count(first.body, `aria-label="Open curve`); n != 10 {
			t.Errorf("first page has %d curves, want 10", n)
		}
		m := regexp.MustCompile(`href="(/ui/curves\?[^"]*cursor=[^"]+)"`).FindStringSubmatch(first.body)
		if m == nil {
			t.Fatal("no link to older curves")
		}
		second := b.get(html.UnescapeString(m[1]))
		if n := strings.Count(second.body, `aria-label="Open curve`); n != 7 || !strings.Contains(second.body, "Newest") || strings.Contains(second.body, "Older curves") {
			t.Errorf("second page: %d curves (want 7), a link back to the newest, none further", n)
		}
		if strings.Contains(second.body, e.failing) || !strings.Contains(second.body, e.curves[0]) {
			t.Error("the second page does not hold the oldest curves")
		}
	})
	t.Run("a bad date is said, not a 500", func(t *testing.T) {
		if p := b.get("/ui/curves?from=yesterday"); p.status != http.StatusBadRequest || !strings.Contains(p.body, "not a date") {
			t.Errorf("got %d", p.status)
		}
	})
	t.Run("trend page lists violations with the chart's alt text", func(t *testing.T) {
		p := b.get("/ui/trends?instrument=" + uiInstrument + "&analyte=Pb")
		for _, want := range []string{"Rule violations", "✗ Reject", `alt="Control chart of the slope`, "Westgard", "accreditation"} {
			if !strings.Contains(p.body, want) {
				t.Errorf("trend page lacks %q", want)
			}
		}
		img := b.get("/ui/trends/plot.svg?instrument=" + uiInstrument + "&analyte=Pb")
		if img.status != http.StatusOK || img.header.Get("Content-Type") != "image/svg+xml" || !strings.Contains(img.body, "<svg") {
			t.Errorf("chart: %d %s", img.status, img.header.Get("Content-Type"))
		}
	})
	t.Run("unknown page and unknown curve", func(t *testing.T) {
		if p := b.get("/ui/nothing-here"); p.status != http.StatusNotFound || !strings.Contains(p.body, "no such page") {
			t.Errorf("unknown page: %d", p.status)
		}
		if p := b.get("/ui/curves/00000000-0000-7000-8000-000000000000"); p.status != http.StatusNotFound {
			t.Errorf("unknown curve: %d", p.status)
		}
	})
}
