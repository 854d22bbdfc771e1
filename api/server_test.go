package api_test

// The harness of the HTTP suite: a real server (httptest.NewServer over
// api.New) on a fresh, migrated PostgreSQL database per test, and a client
// that checks every response it receives against openapi/openapi.yaml with
// apitest, so that no test can forget to.

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"math"
	"math/rand/v2"
	"mime"
	"net"
	"net/http"
	"net/http/httptest"
	"net/url"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/jackc/pgx/v5/pgconn"

	"curvekeeper/api"
	"curvekeeper/api/apitest"
	"curvekeeper/api/oapi"
	"curvekeeper/lab"
	"curvekeeper/openapi"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

// bootstrapSecret is the invented bootstrap admin token of every test server.
const bootstrapSecret = "ck_test_bootstrap_admin_0123456789abcdef"

// env is one test's service: its database, its HTTP server and the admin
// token it was bootstrapped with.
type env struct {
	api   *api.Server
	db    *store.DB
	srv   *httptest.Server
	admin string
	logs  *syncBuffer
}

// syncBuffer collects the server's log lines; the server writes from many
// goroutines.
type syncBuffer struct {
	mu  sync.Mutex
	buf bytes.Buffer
}

func (b *syncBuffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.Write(p)
}

func (b *syncBuffer) String() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.String()
}

// newEnv starts a server on a fresh database with the default Config.
func newEnv(t testing.TB) *env {
	t.Helper()
	return newEnvConfig(t, api.Config{})
}

// newEnvConfig starts a server with cfg on a fresh database and stores the
// bootstrap admin token, as the service does with CURVEKEEPER_BOOTSTRAP_TOKEN.
func newEnvConfig(t testing.TB, cfg api.Config) *env {
	t.Helper()
	return newEnvDB(t, cfg, dbtest.NewAppDB(t))
}

func newEnvDB(t testing.TB, cfg api.Config, db *store.DB, opts ...lab.Option) *env {
	t.Helper()
	logs := &syncBuffer{}
	logger := slog.New(slog.NewJSONHandler(logs, &slog.HandlerOptions{Level: slog.LevelDebug}))
	s, err := api.New(cfg, lab.NewService(db, append([]lab.Option{testClock}, opts...)...), logger)
	if err != nil {
		t.Fatalf("api.New: %v", err)
	}
	// As the service serves: through the framing guard (api.FramingGuard).
	srv := httptest.NewUnstartedServer(s.Handler())
	srv.Listener = api.FramingGuard(srv.Listener)
	srv.Config.ConnContext = api.FramingContext
	srv.Start()
	t.Cleanup(func() {
		srv.Close()
		if t.Failed() {
			t.Logf("server log:\n%s", tail(logs.String(), 6000))
		}
	})
	if _, _, err := db.EnsureToken(context.Background(), "bootstrap-admin", bootstrapSecret, []string{lab.ScopeAdmin}); err != nil {
		t.Fatalf("EnsureToken: %v", err)
	}
	return &env{api: s, db: db, srv: srv, admin: bootstrapSecret, logs: logs}
}

func tail(s string, n int) string {
	if len(s) > n {
		return "…" + s[len(s)-n:]
	}
	return s
}

// call is one request of the suite.
type call struct {
	method      string
	path        string // with query string
	token       string // sent as "Authorization: Bearer <token>" unless empty
	auth        string // a raw Authorization header, overriding token
	contentType string
	body        []byte
	header      map[string]string
	// unrouted marks a request the spec has no route for (an unknown path):
	// apitest cannot match it, so the reply is held to the problem rules here.
	unrouted bool
}

// reply is a response, read in full.
type reply struct {
	status int
	header http.Header
	body   []byte
}

func (r reply) String() string {
	return fmt.Sprintf("%d %s", r.status, snippet(r.body))
}

func snippet(b []byte) string {
	if len(b) > 1500 {
		return string(b[:1500]) + "…"
	}
	return string(b)
}

// do sends c and checks the response against the spec before returning it.
func (e *env) do(t testing.TB, c call) reply {
	t.Helper()
	var body io.Reader
	if c.body != nil {
		body = bytes.NewReader(c.body)
	}
	req, err := http.NewRequest(c.method, e.srv.URL+c.path, body)
	if err != nil {
		t.Fatalf("new request %s %s: %v", c.method, c.path, err)
	}
	switch {
	case c.auth != "":
		req.Header.Set("Authorization", c.auth)
	case c.token != "":
		req.Header.Set("Authorization", "Bearer "+c.token)
	}
	if c.contentType != "" {
		req.Header.Set("Content-Type", c.contentType)
	}
	for k, v := range c.header {
		req.Header.Set(k, v)
	}
	resp, err := e.srv.Client().Do(req)
	if err != nil {
		t.Fatalf("%s %s: %v", c.method, c.path, err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatalf("%s %s: read body: %v", c.method, c.path, err)
	}
	if c.unrouted {
		checkBareProblem(t, req, resp, b)
	} else {
		apitest.ValidateResponse(t, req, resp, b)
	}
	if ct := resp.Header.Get("Content-Type"); strings.HasPrefix(ct, "application/json") || strings.HasPrefix(ct, "application/problem+json") {
		checkTimestamps(t, req, b) // the contract's own JSON; FHIR, HL7 and CSV keep their formats' times
	}
	if resp.Header.Get("X-Request-Id") == "" {
		t.Errorf("%s %s → %d without X-Request-Id", c.method, c.path, resp.StatusCode)
	}
	return reply{status: resp.StatusCode, header: resp.Header, body: b}
}

// checkBareProblem holds a response to a request the spec has no route for
// to the spec's error rules: an RFC 9457 problem whose status is the
// response's.
func checkBareProblem(t testing.TB, req *http.Request, resp *http.Response, body []byte) {
	t.Helper()
	ct, _, err := mime.ParseMediaType(resp.Header.Get("Content-Type"))
	if err != nil || ct != "application/problem+json" {
		t.Errorf("%s %s → %d with Content-Type %q, want application/problem+json", req.Method, req.URL, resp.StatusCode, resp.Header.Get("Content-Type"))
		return
	}
	var p api.Problem
	if err := json.Unmarshal(body, &p); err != nil {
		t.Errorf("%s %s: problem does not decode: %v", req.Method, req.URL, err)
		return
	}
	if p.Status != resp.StatusCode || p.Type == "" || p.Title == "" || p.Detail == "" {
		t.Errorf("%s %s → %d: incomplete problem %+v", req.Method, req.URL, resp.StatusCode, p)
	}
}

func mustJSON(t testing.TB, v any) []byte {
	t.Helper()
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatalf("marshal: %v", err)
	}
	return b
}

// postJSON sends v as application/json.
func (e *env) postJSON(t testing.TB, token, path string, v any, header ...string) reply {
	t.Helper()
	c := call{method: http.MethodPost, path: path, token: token, contentType: "application/json", body: mustJSON(t, v)}
	if len(header) > 0 {
		c.header = map[string]string{}
		for i := 0; i+1 < len(header); i += 2 {
			c.header[header[i]] = header[i+1]
		}
	}
	return e.do(t, c)
}

func (e *env) get(t testing.TB, token, path string) reply {
	t.Helper()
	return e.do(t, call{method: http.MethodGet, path: path, token: token})
}

// decode unmarshals a reply into T after checking its status.
func decode[T any](t testing.TB, r reply, wantStatus int) T {
	t.Helper()
	var v T
	if r.status != wantStatus {
		t.Fatalf("status %d, want %d: %s", r.status, wantStatus, snippet(r.body))
	}
	if err := json.Unmarshal(r.body, &v); err != nil {
		t.Fatalf("decode %T: %v\n%s", v, err, snippet(r.body))
	}
	return v
}

// wantProblem checks that r is a problem with the given status and, when
// pointer is not empty, that its errors name that field.
func wantProblem(t testing.TB, r reply, status int, pointer string) api.Problem {
	t.Helper()
	if r.status != status {
		t.Errorf("status %d, want %d: %s", r.status, status, snippet(r.body))
		return api.Problem{}
	}
	var p api.Problem
	if err := json.Unmarshal(r.body, &p); err != nil {
		t.Errorf("problem does not decode: %v", err)
		return p
	}
	if pointer != "" && !hasPointer(p, pointer) {
		t.Errorf("problem names %v, want %q among them: %s", pointers(p), pointer, snippet(r.body))
	}
	return p
}

func hasPointer(p api.Problem, ptr string) bool {
	for _, f := range p.Errors {
		if f.Pointer == ptr {
			return true
		}
	}
	return false
}

func pointers(p api.Problem) []string {
	out := make([]string, 0, len(p.Errors))
	for _, f := range p.Errors {
		out = append(out, f.Pointer)
	}
	return out
}

// token issues a token through POST /v1/tokens and returns its id and secret.
// testInstruments are the instruments of the tests' invented runs; a
// runs:write token from env.token is bound to them.
var testInstruments = []string{"photometer-7", "photometer-8", "ic-02", "ic-07", "ic-09", "i"}

func (e *env) token(t testing.TB, name string, scopes ...string) (id, secret string) {
	t.Helper()
	body := map[string]any{"name": name, "scopes": scopes}
	if slices.Contains(scopes, lab.ScopeRunsWrite) && !slices.Contains(scopes, lab.ScopeAdmin) {
		body["instruments"] = testInstruments // instrument binding is required
	}
	if slices.Contains(scopes, lab.ScopeRunsWrite) && slices.Contains(scopes, lab.ScopeCurvesReview) {
		body["allow_dual_role"] = true
	}
	r := e.postJSON(t, e.admin, "/v1/tokens", body)
	tc := decode[oapi.TokenCreated](t, r, http.StatusCreated)
	return tc.ID.String(), tc.Token
}

// ---------- invented data ----------

// The invented scenario: a water lab's photometer-7 measures nitrate in mg/L.
// Responses follow the invented line y = 0.02 + 0.51·x plus small Gaussian
// noise from a fixed seed, so every run is reproducible.
const (
	trueIntercept = 0.02
	trueSlope     = 0.51
	noiseSD       = 0.004
)

// levels are the 8 invented standard concentrations, mg/L.
var levels = []float64{0.5, 1, 2, 3, 4, 5, 6, 8}

func trueResponse(x float64) float64 { return trueIntercept + trueSlope*x }

// standards returns 8 levels × 2 replicates of analyte on the invented
// line, the noise drawn from seed.
func standards(analyte string, seed uint64) []map[string]any {
	rng := rand.New(rand.NewPCG(seed, 7))
	out := make([]map[string]any, 0, len(levels))
	for i, x := range levels {
		resp := make([]float64, 2)
		for k := range resp {
			resp[k] = round6(trueResponse(x) + noiseSD*rng.NormFloat64())
		}
		out = append(out, map[string]any{"analyte": analyte, "level": fmt.Sprintf("L%d", i+1),
			"concentration": x, "responses": resp})
	}
	return out
}

func round6(v float64) float64 { return math.Round(v*1e6) / 1e6 }

// runBody is a JSON run of the given standards.
func runBody(method, instrument string, at time.Time, stds ...[]map[string]any) map[string]any {
	var all []map[string]any
	for _, s := range stds {
		all = append(all, s...)
	}
	return map[string]any{"method": method, "instrument": instrument,
		"acquired_at": at.UTC().Format(time.RFC3339), "operator": "analyst-3", "standards": all}
}

// baseTime is when the invented runs were acquired.
var baseTime = time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)

// method creates a linear, unweighted method over the analytes (all mg/L).
func (e *env) method(t testing.TB, name string, analytes ...string) oapi.Method {
	t.Helper()
	as := make([]map[string]any, 0, len(analytes))
	for _, a := range analytes {
		as = append(as, map[string]any{"name": a, "unit": "mg/L"})
	}
	r := e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": name, "model": "linear",
		"weighting": "none", "analytes": as})
	return decode[oapi.Method](t, r, http.StatusCreated)
}

// run posts a run as token and returns what the service answered.
func (e *env) run(t testing.TB, token string, body map[string]any) oapi.RunCreated {
	t.Helper()
	return decode[oapi.RunCreated](t, e.postJSON(t, token, "/v1/runs", body), http.StatusCreated)
}

// nitrateCurve sets up the nitrate method and posts one passing run; it
// returns the run.
func (e *env) nitrateCurve(t testing.TB) oapi.RunCreated {
	t.Helper()
	e.method(t, "nitrate-uv", "nitrate", "phosphate")
	return e.run(t, e.admin, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)))
}

// counts are the rows of the tables a request could write.
type counts map[string]int

func (e *env) counts(t testing.TB) counts {
	t.Helper()
	out := counts{}
	for _, table := range []string{"runs", "readings", "run_samples", "curves", "reviews", "audit", "methods", "tokens", "idempotency_keys"} {
		var n int
		if err := e.db.Pool.QueryRow(context.Background(), "SELECT count(*) FROM "+table).Scan(&n); err != nil {
			t.Fatalf("count %s: %v", table, err)
		}
		out[table] = n
	}
	return out
}

func (c counts) diff(other counts) string {
	var b strings.Builder
	for k, v := range c {
		if other[k] != v {
			fmt.Fprintf(&b, "%s %d → %d; ", k, v, other[k])
		}
	}
	return b.String()
}

// ---------- operations ----------

func TestHealthAndReady(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	for _, tt := range []struct{ path, want string }{{"/healthz", "ok"}, {"/readyz", "ready"}} {
		h := decode[oapi.Health](t, e.get(t, "", tt.path), http.StatusOK)
		if string(h.Status) != tt.want {
			t.Errorf("%s status %q, want %q", tt.path, h.Status, tt.want)
		}
	}
}

func TestOpenAPIServed(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	r := e.get(t, "", "/openapi.yaml")
	if r.status != http.StatusOK {
		t.Fatalf("GET /openapi.yaml: %s", r)
	}
	doc, err := openapi3.NewLoader().LoadFromData(r.body)
	if err != nil {
		t.Fatalf("served document does not parse: %v", err)
	}
	if err := doc.Validate(context.Background()); err != nil {
		t.Errorf("served document is not valid OpenAPI: %v", err)
	}
	if !bytes.Equal(r.body, openapi.YAML) {
		t.Error("served document differs from openapi/openapi.yaml")
	}
}

func TestMetricsUseRouteTemplates(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	run := e.nitrateCurve(t)
	id := run.Curves[0].ID.String()
	e.get(t, e.admin, "/v1/curves/"+id)
	e.get(t, e.admin, "/v1/curves/"+id+"/audit")
	r := e.get(t, "", "/metrics")
	if r.status != http.StatusOK {
		t.Fatalf("GET /metrics: %s", r)
	}
	text := string(r.body)
	for _, want := range []string{
		`curvekeeper_http_requests_total{method="GET",route="/v1/curves/:id",status="200"} 1`,
		`curvekeeper_http_requests_total{method="GET",route="/v1/curves/:id/audit",status="200"} 1`,
		`curvekeeper_http_requests_total{method="POST",route="/v1/runs",status="201"} 1`,
	} {
		if !strings.Contains(text, want) {
			t.Errorf("metrics lack %s", want)
		}
	}
	if strings.Contains(text, id) || strings.Contains(text, run.ID.String()) {
		t.Error("metrics carry a raw id")
	}
}

// TestMetricsBoundUnknownMethods: made-up method names, sent without a token,
// all count under one label value, so no client can grow /metrics.
func TestMetricsBoundUnknownMethods(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	for i := range 50 {
		m := "X" + strings.Repeat("Y", 200) + strconv.Itoa(i)
		req, err := http.NewRequest(m, e.srv.URL+"/v1/curves", nil)
		if err != nil {
			t.Fatal(err)
		}
		resp, err := e.srv.Client().Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
	}
	r := e.get(t, "", "/metrics")
	text := string(r.body)
	if strings.Contains(text, "YYYY") {
		t.Error("metrics carry a made-up method name")
	}
	if got := strings.Count(text, `curvekeeper_http_requests_total{method="other"`); got != 1 {
		t.Errorf("made-up methods fall into %d series, want 1:\n%s", got, text)
	}
}

func TestRequestID(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	r := e.do(t, call{method: http.MethodGet, path: "/healthz", header: map[string]string{"X-Request-Id": "lims-req.0042_a"}})
	if got := r.header.Get("X-Request-Id"); got != "lims-req.0042_a" {
		t.Errorf("X-Request-Id %q, want the client's", got)
	}
	// A malformed one is replaced, and a problem quotes the id it answers with.
	r = e.do(t, call{method: http.MethodGet, path: "/v1/curves", header: map[string]string{"X-Request-Id": "bad id; drop"}})
	got := r.header.Get("X-Request-Id")
	if got == "" || got == "bad id; drop" {
		t.Errorf("X-Request-Id %q, want a fresh one", got)
	}
	p := wantProblem(t, r, http.StatusUnauthorized, "")
	if p.RequestID != got {
		t.Errorf("problem request_id %q, header %q", p.RequestID, got)
	}
}

// TestDatabaseUnreachable cuts the service off from PostgreSQL (through a
// TCP relay the test controls) and expects 503 problems with Retry-After,
// never a 500 and never the cause.
func TestDatabaseUnreachable(t *testing.T) {
	t.Parallel()
	relay := newRelay(t, dbtest.NewURL(t))
	db, err := store.Open(context.Background(), relay.url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(db.Close)
	e := newEnvDB(t, api.Config{RequestTimeout: 3 * time.Second}, db)
	if r := e.get(t, e.admin, "/v1/methods"); r.status != http.StatusOK {
		t.Fatalf("before the cut: %s", r)
	}
	relay.cut()
	for _, c := range []call{
		{method: http.MethodGet, path: "/v1/methods", token: e.admin},
		{method: http.MethodGet, path: "/readyz"},
		{method: http.MethodPost, path: "/v1/runs", token: e.admin, contentType: "application/json",
			body: mustJSON(t, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)))},
	} {
		start := time.Now()
		r := e.do(t, c)
		wantProblem(t, r, http.StatusServiceUnavailable, "")
		if r.header.Get("Retry-After") == "" {
			t.Errorf("%s %s: 503 without Retry-After", c.method, c.path)
		}
		if d := time.Since(start); d > 5*time.Second {
			t.Errorf("%s %s took %v, longer than the request timeout", c.method, c.path, d)
		}
		for _, leak := range []string{"dial", "refused", "127.0.0.1", "pgx", "store:"} {
			if strings.Contains(string(r.body), leak) {
				t.Errorf("%s %s: the problem leaks %q: %s", c.method, c.path, leak, r.body)
			}
		}
	}
}

// relay forwards TCP connections to a PostgreSQL server until cut.
type relay struct {
	url  string
	ln   net.Listener
	mu   sync.Mutex
	cons []net.Conn
}

func newRelay(t *testing.T, dbURL string) *relay {
	t.Helper()
	cfg, err := pgconn.ParseConfig(dbURL)
	if err != nil {
		t.Fatal(err)
	}
	network, target := "tcp", net.JoinHostPort(cfg.Host, strconv.Itoa(int(cfg.Port)))
	if strings.HasPrefix(cfg.Host, "/") {
		network, target = "unix", fmt.Sprintf("%s/.s.PGSQL.%d", cfg.Host, cfg.Port)
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	u := url.URL{Scheme: "postgres", User: url.User(cfg.User), Host: ln.Addr().String(), Path: "/" + cfg.Database,
		RawQuery: "sslmode=disable&connect_timeout=2"}
	if cfg.Password != "" {
		u.User = url.UserPassword(cfg.User, cfg.Password)
	}
	r := &relay{url: u.String(), ln: ln}
	go func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			up, err := net.Dial(network, target)
			if err != nil {
				c.Close()
				continue
			}
			r.mu.Lock()
			r.cons = append(r.cons, c, up)
			r.mu.Unlock()
			go func() { _, _ = io.Copy(up, c); up.Close() }()
			go func() { _, _ = io.Copy(c, up); c.Close() }()
		}
	}()
	t.Cleanup(r.cut)
	return r
}

// cut stops accepting and breaks every relayed connection.
func (r *relay) cut() {
	r.ln.Close()
	r.mu.Lock()
	defer r.mu.Unlock()
	for _, c := range r.cons {
		c.Close()
	}
	r.cons = nil
}

// TestClosedPoolDoesNotLeak closes the service's connection pool under it:
// whatever the status, the problem carries no cause, only the request id.
func TestClosedPoolDoesNotLeak(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.db.Close()
	r := e.get(t, e.admin, "/v1/methods")
	p := wantProblemAtLeast(t, r, 500)
	if r.status != 503 || r.header.Get("Retry-After") == "" {
		t.Errorf("a closed pool (shutdown) answers %d, Retry-After %q; want 503 with Retry-After", r.status, r.header.Get("Retry-After"))
	}
	if p.Detail != "the database cannot be reached; retry later" {
		t.Errorf("detail %q says more than the contract allows", p.Detail)
	}
	for _, leak := range []string{"closed", "pool", "store:", "pgx"} {
		if strings.Contains(string(r.body), leak) {
			t.Errorf("the problem leaks %q: %s", leak, r.body)
		}
	}
	if p.RequestID == "" || !strings.Contains(e.logs.String(), p.RequestID) {
		t.Errorf("request id %q is not in the log that holds the cause", p.RequestID)
	}
}

func wantProblemAtLeast(t testing.TB, r reply, status int) api.Problem {
	t.Helper()
	var p api.Problem
	if r.status < status {
		t.Fatalf("status %d, want ≥ %d: %s", r.status, status, snippet(r.body))
	}
	if err := json.Unmarshal(r.body, &p); err != nil {
		t.Fatalf("problem does not decode: %v", err)
	}
	return p
}

// A JSON string value (not text inside one, such as an audit detail quoting
// a request) that starts like an RFC 3339 date-time, and the one form the
// contract writes every time in: UTC, six fractional digits.
var (
	looksLikeTime = regexp.MustCompile(`[:,\[]"[0-9]{4}-[0-9]{2}-[0-9]{2}T[^"]*"`)
	localTime     = regexp.MustCompile(`"signed_at_local":"[^"]*"`)
	contractTime  = regexp.MustCompile(`^"[0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9]{2}:[0-9]{2}:[0-9]{2}\.[0-9]{6}Z"$`)
)

// checkTimestamps holds every time in a JSON response to the contract's one
// form.
func checkTimestamps(t testing.TB, req *http.Request, body []byte) {
	t.Helper()
	// signed_at_local is the one time given in the lab's zone on purpose
	// (the manifestation of a signature a person reads).
	body = localTime.ReplaceAll(body, nil)
	for _, m := range looksLikeTime.FindAll(body, -1) {
		m = m[1:] // the member's ':' or the array's ',' or '['
		if !contractTime.Match(m) {
			t.Errorf("%s %s: time %s is not RFC 3339 UTC with six fractional digits", req.Method, req.URL.Path, m)
		}
	}
}
