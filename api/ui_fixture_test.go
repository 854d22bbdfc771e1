package api_test

// The fixture of the QA page and trend tests: a real server (httptest over
// api.New) on a fresh dbtest database, loaded through the API with an
// invented lab's history: instrument "fen-icpms-3" measuring lead (Pb) once
// a day, its slope falling 1.5 % a day after ten steady days, the older
// curves approved; plus one run with only four levels, whose curve fails the
// mandatory min_levels check.

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net/http"
	"net/http/cookiejar"
	"net/http/httptest"
	"net/url"
	"regexp"
	"strings"
	"testing"
	"time"

	"curvekeeper/api"
	"curvekeeper/api/apitest"
	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

const (
	uiInstrument = "fen-icpms-3"
	uiMethod     = "fen-metals"
	uiDays       = 16
)

// uiStart is the first day of the fixture's history.
var uiStart = time.Date(2031, 5, 5, 8, 0, 0, 0, time.UTC)

type uiEnv struct {
	db      *store.DB
	srv     *httptest.Server
	admin   string            // admin token secret
	tokens  map[string]string // scope → token secret
	curves  []string          // Pb curve ids, oldest first
	failing string            // the curve that fails min_levels
}

func newUIEnv(t *testing.T, tls bool) *uiEnv {
	t.Helper()
	db := dbtest.NewDB(t)
	s, err := api.New(api.Config{}, lab.NewService(db, testClock), slog.New(slog.NewTextHandler(io.Discard, nil)))
	if err != nil {
		t.Fatal(err)
	}
	e := &uiEnv{db: db, tokens: map[string]string{}}
	if tls {
		e.srv = httptest.NewTLSServer(s.Handler())
	} else {
		e.srv = httptest.NewServer(s.Handler())
	}
	t.Cleanup(e.srv.Close)
	ctx := context.Background()
	if _, e.admin, err = db.CreateToken(ctx, "fixture-admin", []string{lab.ScopeAdmin}, "test"); err != nil {
		t.Fatal(err)
	}
	for _, sc := range []string{lab.ScopeRunsWrite, lab.ScopeResultsRead, lab.ScopeCurvesReview} {
		_, secret, err := db.CreateToken(ctx, "fixture-"+strings.ReplaceAll(sc, ":", "-"), []string{sc}, "test")
		if err != nil {
			t.Fatal(err)
		}
		e.tokens[sc] = secret
	}
	e.api(t, e.admin, http.MethodPost, "/v1/methods", map[string]any{
		"name": uiMethod, "model": "linear", "weighting": "1/x^2",
		"analytes": []map[string]string{{"name": "Pb", "unit": "ug/L"}},
	}, http.StatusCreated, nil)
	for day := 0; day < uiDays; day++ {
		id := e.postRun(t, uiStart.AddDate(0, 0, day), uiSlope(day), []float64{0.5, 1, 2, 5, 10, 20, 50})
		e.curves = append(e.curves, id)
		if day < uiDays-3 { // QA approved all but the last three
			e.api(t, e.tokens[lab.ScopeCurvesReview], http.MethodPost, "/v1/curves/"+id+"/review",
				map[string]any{"decision": "approve", "reason": "fixture: weekly QA round"}, http.StatusOK, nil)
		}
	}
	e.failing = e.postRun(t, uiStart.AddDate(0, 0, uiDays).Add(2*time.Hour), uiSlope(uiDays), []float64{1, 5, 10, 50})
	return e
}

// uiSlope is the fixture's lead sensitivity on day d: steady for ten days
// with a small alternating wobble, then falling 1.5 % a day.
func uiSlope(d int) float64 {
	s := 1800 * (1 + 0.004*float64(d%3-1))
	if d >= 10 {
		s *= math.Pow(0.985, float64(d-9))
	}
	return s
}

// uiPbStandards returns the seven duplicate Pb standards (0.5–50 ug/L, levels
// Pb-1…Pb-7) on the line 40 + uiSlope(uiDays)·x that the budget, top-down
// and context pages post.
func uiPbStandards() []map[string]any {
	var stds []map[string]any
	for i, x := range []float64{0.5, 1, 2, 5, 10, 20, 50} {
		y := 40 + uiSlope(uiDays)*x
		stds = append(stds, map[string]any{"analyte": "Pb", "level": "Pb-" + string(rune('1'+i)), "concentration": x,
			"responses": []float64{y * 1.004, y * 0.997}})
	}
	return stds
}

// postRun posts one Pb run of duplicate standards on the line
// 40 + slope·x (with a small deterministic scatter) and returns its curve id.
func (e *uiEnv) postRun(t *testing.T, at time.Time, slope float64, levels []float64) string {
	t.Helper()
	return e.postRunAs(t, e.tokens[lab.ScopeRunsWrite], at, slope, levels)
}

// postRunAs is postRun through the token whose secret is token.
func (e *uiEnv) postRunAs(t *testing.T, token string, at time.Time, slope float64, levels []float64) string {
	t.Helper()
	var stds []map[string]any
	for i, x := range levels {
		y := 40 + slope*x
		stds = append(stds, map[string]any{"analyte": "Pb", "level": fmt.Sprintf("Pb-%d", i+1), "concentration": x,
			"responses": []float64{y * (1 + 0.006*float64(i%3-1)), y * (1 - 0.004*float64(i%2))}})
	}
	var out struct {
		Curves []struct {
			ID string `json:"id"`
		} `json:"curves"`
	}
	e.api(t, token, http.MethodPost, "/v1/runs", map[string]any{
		"method": uiMethod, "instrument": uiInstrument, "acquired_at": at.Format(time.RFC3339), "standards": stds,
	}, http.StatusCreated, &out)
	return out.Curves[0].ID
}

// api sends a JSON request with a bearer token, checks the status and the
// response against the spec, and decodes the body into out.
func (e *uiEnv) api(t *testing.T, token, method, path string, body any, want int, out any) []byte {
	t.Helper()
	var rd io.Reader
	var raw []byte
	if body != nil {
		b, err := json.Marshal(body)
		if err != nil {
			t.Fatal(err)
		}
		raw, rd = b, bytes.NewReader(b)
	}
	req, err := http.NewRequest(method, e.srv.URL+path, rd)
	if err != nil {
		t.Fatal(err)
	}
	req.Header.Set("Authorization", "Bearer "+token)
	if body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	resp, err := e.srv.Client().Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	if raw != nil {
		req.Body = io.NopCloser(bytes.NewReader(raw))
	}
	if strings.HasPrefix(resp.Header.Get("Content-Type"), "image/") {
		// apitest decodes JSON and problem bodies only; an image is checked
		// for its status and media type here and by the caller.
		if resp.StatusCode == http.StatusOK && resp.Header.Get("Content-Type") != "image/svg+xml" {
			t.Errorf("%s %s: Content-Type %q", method, path, resp.Header.Get("Content-Type"))
		}
	} else {
		apitest.ValidateResponse(t, req, resp, b)
	}
	if resp.StatusCode != want {
		t.Fatalf("%s %s: %d, want %d: %s", method, path, resp.StatusCode, want, b)
	}
	if out != nil {
		if err := json.Unmarshal(b, out); err != nil {
			t.Fatal(err)
		}
	}
	return b
}

// browser is a cookie-keeping client of the QA pages that does not follow
// redirects, so tests see each 303.
type browser struct {
	t   *testing.T
	e   *uiEnv
	c   *http.Client
	jar *cookiejar.Jar
}

func (e *uiEnv) browser(t *testing.T) *browser {
	t.Helper()
	jar, err := cookiejar.New(nil)
	if err != nil {
		t.Fatal(err)
	}
	c := *e.srv.Client()
	c.Jar = jar
	c.CheckRedirect = func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }
	return &browser{t: t, e: e, c: &c, jar: jar}
}

type page struct {
	status int
	header http.Header
	body   string
}

func (b *browser) get(path string) page {
	b.t.Helper()
	resp, err := b.c.Get(b.e.srv.URL + path)
	if err != nil {
		b.t.Fatal(err)
	}
	return readPage(b.t, resp)
}

func (b *browser) post(path string, form url.Values) page {
	b.t.Helper()
	resp, err := b.c.PostForm(b.e.srv.URL+path, form)
	if err != nil {
		b.t.Fatal(err)
	}
	return readPage(b.t, resp)
}

func readPage(t *testing.T, resp *http.Response) page {
	t.Helper()
	defer resp.Body.Close()
	body, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	return page{status: resp.StatusCode, header: resp.Header, body: string(body)}
}

var hiddenCSRF = regexp.MustCompile(`name="csrf_token" value="([^"]+)"`)

// csrf returns the first form token of a page.
func (p page) csrf(t *testing.T) string {
	t.Helper()
	m := hiddenCSRF.FindStringSubmatch(p.body)
	if m == nil {
		t.Fatalf("no csrf_token field on the page:\n%s", p.body)
	}
	return m[1]
}

// signIn signs in with token and returns the sign-in response.
func (b *browser) signIn(token string) page {
	b.t.Helper()
	form := b.get("/ui/sign-in")
	if form.status != http.StatusOK {
		b.t.Fatalf("sign-in page: %d", form.status)
	}
	return b.post("/ui/sign-in", url.Values{"csrf_token": {form.csrf(b.t)}, "token": {token}, "next": {"/ui/curves"}})
}

func (b *browser) mustSignIn(token string) {
	b.t.Helper()
	if p := b.signIn(token); p.status != http.StatusSeeOther {
		b.t.Fatalf("sign in: %d %s", p.status, p.body)
	}
}
