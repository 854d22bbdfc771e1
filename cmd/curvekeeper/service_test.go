package main

// The harness of the fault and security tests: the real binary, built by
// go build into the test's folder and started as a child process on port 0,
// a client that checks the headers of every response it receives, and
// checks of what the database holds.

import (
	"bufio"
	"bytes"
	"context"
	"crypto/rand"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"
)

// startupTimeout bounds a service's start, private cluster included.
const startupTimeout = 90 * time.Second

// buildBinary builds ./cmd/curvekeeper into the test's temporary folder.
func buildBinary(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "curvekeeper")
	out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput()
	if err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// proc is one running curvekeeper process (the built binary; main_test.go's
// service runs run() in-process instead).
type proc struct {
	t      *testing.T
	cmd    *exec.Cmd
	base   string // http://127.0.0.1:port
	stdout *lockedBuffer
	stderr *lockedBuffer
	addr   chan string   // receives the URL the service prints
	done   chan struct{} // closed when the process has exited
	err    error         // its exit status, after done
}

// startProc runs the binary with args and env (added to a clean copy of
// the test's environment) and waits until it prints its address.
func startProc(t *testing.T, bin string, env []string, args ...string) *proc {
	t.Helper()
	s := launchProc(t, bin, env, args...)
	s.ready()
	return s
}

// launchProc starts the binary without waiting for it; ready waits.
func launchProc(t *testing.T, bin string, env []string, args ...string) *proc {
	t.Helper()
	cmd := exec.Command(bin, append([]string{"serve", "--listen", "127.0.0.1:0"}, args...)...)
	for _, kv := range os.Environ() {
		if !strings.HasPrefix(kv, "DATABASE_URL=") && !strings.HasPrefix(kv, "CURVEKEEPER_") {
			cmd.Env = append(cmd.Env, kv)
		}
	}
	cmd.Env = append(cmd.Env, env...)
	s := &proc{t: t, cmd: cmd, stdout: &lockedBuffer{}, stderr: &lockedBuffer{}, done: make(chan struct{})}
	outPipe, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	cmd.Stderr = s.stderr
	if err := cmd.Start(); err != nil {
		t.Fatalf("start %s: %v", bin, err)
	}
	addr := make(chan string, 1)
	copied := make(chan struct{})
	go func() {
		defer close(copied)
		sc := bufio.NewScanner(outPipe)
		for sc.Scan() {
			line := sc.Text()
			fmt.Fprintln(s.stdout, line)
			if url, ok := strings.CutPrefix(line, "curvekeeper: listening on "); ok {
				select {
				case addr <- url:
				default:
				}
			}
		}
	}()
	go func() {
		<-copied // Wait closes the pipe; read it to the end first
		s.err = cmd.Wait()
		close(s.done)
	}()
	t.Cleanup(func() { s.kill() })
	s.addr = addr
	return s
}

// ready waits until the service prints the address it listens on.
func (s *proc) ready() {
	t := s.t
	t.Helper()
	select {
	case a := <-s.addr:
		s.base = a
	case <-s.done:
		t.Fatalf("service exited before listening (%v)\nstdout:\n%s\nstderr:\n%s", s.err, s.stdout, tailLines(s.stderr.String(), 20))
	case <-time.After(startupTimeout):
		s.kill()
		t.Fatalf("service did not listen within %s\nstderr:\n%s", startupTimeout, tailLines(s.stderr.String(), 20))
	}
}

// kill sends SIGKILL (unless the process has exited) and waits for it.
func (s *proc) kill() {
	select {
	case <-s.done:
		return
	default:
	}
	_ = s.cmd.Process.Signal(syscall.SIGKILL)
	<-s.done
}

// signal sends sig to the process.
func (s *proc) signal(sig os.Signal) {
	s.t.Helper()
	if err := s.cmd.Process.Signal(sig); err != nil {
		s.t.Fatalf("signal %v: %v", sig, err)
	}
}

// wait waits up to d for the process to exit and returns its exit error.
func (s *proc) wait(d time.Duration) error {
	s.t.Helper()
	select {
	case <-s.done:
		return s.err
	case <-time.After(d):
		s.t.Fatalf("service did not exit within %s\nstderr:\n%s", d, tailLines(s.stderr.String(), 20))
		return nil
	}
}

// logs is everything the process wrote.
func (s *proc) logs() string { return s.stdout.String() + s.stderr.String() }

func tailLines(s string, n int) string {
	lines := strings.Split(strings.TrimRight(s, "\n"), "\n")
	if len(lines) > n {
		lines = lines[len(lines)-n:]
	}
	return strings.Join(lines, "\n")
}

// newSecret is an invented bootstrap secret, 256 random bits.
func newSecret(t *testing.T) string {
	t.Helper()
	b := make([]byte, 32)
	if _, err := rand.Read(b); err != nil {
		t.Fatal(err)
	}
	return "ck_boot_" + base64.RawURLEncoding.EncodeToString(b)
}

// headerCheck is a RoundTripper that fails the test for any response
// without the security headers every response must carry.
type headerCheck struct {
	t    *testing.T
	next http.RoundTripper

	mu    sync.Mutex
	count int
}

func (h *headerCheck) RoundTrip(req *http.Request) (*http.Response, error) {
	resp, err := h.next.RoundTrip(req)
	if err != nil {
		return resp, err
	}
	h.mu.Lock()
	h.count++
	h.mu.Unlock()
	want := map[string]string{
		"X-Content-Type-Options":  "nosniff",
		"Referrer-Policy":         "no-referrer",
		"X-Frame-Options":         "DENY",
		"Content-Security-Policy": "frame-ancestors 'none'",
	}
	if strings.HasPrefix(req.URL.Path, "/v1/") {
		want["Cache-Control"] = "no-store"
	}
	for k, v := range want {
		if got := resp.Header.Get(k); got != v {
			h.t.Errorf("%s %s → %d: header %s = %q, want %q", req.Method, req.URL.Path, resp.StatusCode, k, got, v)
		}
	}
	hsts := resp.Header.Get("Strict-Transport-Security")
	if (req.URL.Scheme == "https") != (hsts != "") {
		h.t.Errorf("%s %s over %s: Strict-Transport-Security = %q", req.Method, req.URL.Path, req.URL.Scheme, hsts)
	}
	return resp, nil
}

// client talks to one or more services, checking every response's headers.
type client struct {
	t      *testing.T
	http   *http.Client
	checks *headerCheck
}

func newClient(t *testing.T, tr *http.Transport) *client {
	if tr == nil {
		tr = http.DefaultTransport.(*http.Transport).Clone()
	}
	tr.MaxIdleConnsPerHost = 16
	hc := &headerCheck{t: t, next: tr}
	return &client{t: t, http: &http.Client{Transport: hc, Timeout: 60 * time.Second}, checks: hc}
}

// reply is a response read whole.
type reply struct {
	status  int
	header  http.Header
	body    []byte
	elapsed time.Duration
}

func (r reply) String() string {
	b := r.body
	if len(b) > 300 {
		b = b[:300]
	}
	return fmt.Sprintf("%d %s", r.status, b)
}

// do sends one request; a transport error is returned, not fatal, since
// fault tests expect some.
func (c *client) do(method, url, token, contentType string, body []byte, header ...string) (reply, error) {
	var rd io.Reader
	if body != nil {
		rd = bytes.NewReader(body)
	}
	req, err := http.NewRequest(method, url, rd)
	if err != nil {
		return reply{}, err
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	if contentType != "" {
		req.Header.Set("Content-Type", contentType)
	}
	for i := 0; i+1 < len(header); i += 2 {
		req.Header.Set(header[i], header[i+1])
	}
	start := time.Now()
	resp, err := c.http.Do(req)
	if err != nil {
		return reply{}, err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		return reply{}, err
	}
	return reply{status: resp.StatusCode, header: resp.Header, body: b, elapsed: time.Since(start)}, nil
}

// must sends a request that must be answered with want.
func (c *client) must(want int, method, url, token string, body any, header ...string) reply {
	c.t.Helper()
	var b []byte
	ct := ""
	if body != nil {
		var err error
		if b, err = json.Marshal(body); err != nil {
			c.t.Fatal(err)
		}
		ct = "application/json"
	}
	r, err := c.do(method, url, token, ct, b, header...)
	if err != nil {
		c.t.Fatalf("%s %s: %v", method, url, err)
	}
	if r.status != want {
		c.t.Fatalf("%s %s = %s, want %d", method, url, r, want)
	}
	return r
}

// problem checks that r is problem details and returns them.
func problem(t *testing.T, r reply) map[string]any {
	t.Helper()
	if ct := r.header.Get("Content-Type"); !strings.HasPrefix(ct, "application/problem+json") {
		t.Fatalf("Content-Type = %q, want application/problem+json (%s)", ct, r)
	}
	var p map[string]any
	if err := json.Unmarshal(r.body, &p); err != nil {
		t.Fatalf("problem body: %v (%s)", err, r)
	}
	if int(p["status"].(float64)) != r.status {
		t.Fatalf("problem status %v in a %d response", p["status"], r.status)
	}
	return p
}

// The invented water lab: method nitrate-ic, analyte nitrate in mg/L on an
// invented ion chromatograph.
const methodName = "nitrate-ic"

func methodBody() map[string]any {
	return map[string]any{"name": methodName, "model": "linear", "weighting": "none",
		"analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L"}}}
}

// runBody is run number i: five levels of two replicates on the invented
// line response = 0.02 + 1.5·c, with small offsets that differ per i so
// that every run is a different request.
func runBody(i int) map[string]any {
	var stds []map[string]any
	for j, c := range []float64{0.5, 1, 2, 5, 10} {
		y := 0.02 + 1.5*c
		d := 0.001 * float64((i*7+j*3)%11-5)
		stds = append(stds, map[string]any{"analyte": "nitrate", "level": "L" + strconv.Itoa(j+1),
			"concentration": c, "responses": []float64{round6(y + d), round6(y - d/2)}})
	}
	return map[string]any{"method": methodName, "instrument": "ic-02",
		"acquired_at": time.Date(2025, 3, 1, 8, 0, 0, 0, time.UTC).Add(time.Duration(i) * time.Minute).Format(time.RFC3339),
		"standards":   stds}
}

func round6(v float64) float64 { return math.Round(v*1e6) / 1e6 }

// created is the part of a 201 answer to POST /v1/runs the tests check.
type created struct {
	ID     string `json:"id"`
	Curves []struct {
		ID string `json:"id"`
	} `json:"curves"`
}

func decodeCreated(t *testing.T, r reply) created {
	t.Helper()
	var c created
	if err := json.Unmarshal(r.body, &c); err != nil || c.ID == "" || len(c.Curves) == 0 {
		t.Fatalf("201 body %s: %v", r, err)
	}
	return c
}

// issueToken creates a token with the given scopes and returns its secret.
func (c *client) issueToken(base, admin, name string, scopes ...string) (id, secret string) {
	c.t.Helper()
	body := map[string]any{"name": name, "scopes": scopes}
	if slices.Contains(scopes, "runs:write") && !slices.Contains(scopes, "admin") {
		body["instruments"] = []string{"ic-02", "ic-07", "photometer-7"} // instrument binding is required
	}
	r := c.must(http.StatusCreated, "POST", base+"/v1/tokens", admin, body)
	var out struct {
		ID    string `json:"id"`
		Token string `json:"token"`
	}
	if err := json.Unmarshal(r.body, &out); err != nil || out.Token == "" {
		c.t.Fatalf("token body %s: %v", r, err)
	}
	return out.ID, out.Token
}

// openPool connects the test itself to url as the login user.
func openPool(t *testing.T, url string) *pgxpool.Pool {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	pool, err := pgxpool.New(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	if err := pool.Ping(ctx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(pool.Close)
	return pool
}

// checkStoredIntegrity checks every run in the database, acknowledged or
// not: each has all the readings of its payload, one curve per analyte,
// a run.create audit row and a curve.create audit row per curve, and an
// idempotency key row when one was sent. It returns the number of runs.
func checkStoredIntegrity(t *testing.T, pool *pgxpool.Pool) int {
	t.Helper()
	ctx := context.Background()
	checks := []struct{ name, sql string }{
		{"runs whose readings differ from their payload", `
SELECT count(*) FROM runs r
WHERE (SELECT count(*) FROM readings g WHERE g.run_id = r.id) <>
      (SELECT coalesce(sum(jsonb_array_length(s->'responses')), 0) FROM jsonb_array_elements(r.payload->'standards') s)`},
		{"runs without a curve", `SELECT count(*) FROM runs r WHERE NOT EXISTS (SELECT 1 FROM curves c WHERE c.run_id = r.id)`},
		{"runs without a run.create audit row", `
SELECT count(*) FROM runs r WHERE NOT EXISTS
  (SELECT 1 FROM audit a WHERE a.entity_type = 'run' AND a.entity_id = r.id::text AND a.action = 'run.create')`},
		{"curves without a curve.create audit row", `
SELECT count(*) FROM curves c WHERE NOT EXISTS
  (SELECT 1 FROM audit a WHERE a.entity_type = 'curve' AND a.entity_id = c.id::text AND a.action = 'curve.create')`},
		{"readings without a run", `SELECT count(*) FROM readings g WHERE NOT EXISTS (SELECT 1 FROM runs r WHERE r.id = g.run_id)`},
	}
	for _, c := range checks {
		var n int
		if err := pool.QueryRow(ctx, c.sql).Scan(&n); err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if n != 0 {
			t.Errorf("%s: %d, want 0", c.name, n)
		}
	}
	var runs int
	if err := pool.QueryRow(ctx, `SELECT count(*) FROM runs`).Scan(&runs); err != nil {
		t.Fatal(err)
	}
	return runs
}

// checkAcknowledged checks that each acknowledged run is stored as it was
// posted and answered: the same readings (GET /v1/runs/{id}), the same
// curves. It returns how many it checked and how many were not found.
func (c *client) checkAcknowledged(base, token string, acked map[string]ackedRun) (checked, lost int) {
	c.t.Helper()
	for key, a := range acked {
		r, err := c.do("GET", base+"/v1/runs/"+a.created.ID, token, "", nil)
		if err != nil {
			c.t.Fatalf("GET run %s: %v", a.created.ID, err)
		}
		checked++
		if r.status == http.StatusNotFound {
			c.t.Errorf("acknowledged run %s (key %s) is lost", a.created.ID, key)
			lost++
			continue
		}
		if r.status != http.StatusOK {
			c.t.Fatalf("GET run %s = %s", a.created.ID, r)
		}
		var got struct {
			Standards []struct {
				Level         string    `json:"level"`
				Concentration float64   `json:"concentration"`
				Responses     []float64 `json:"responses"`
			} `json:"standards"`
			Curves []struct {
				ID string `json:"id"`
			} `json:"curves"`
		}
		if err := json.Unmarshal(r.body, &got); err != nil {
			c.t.Fatalf("run %s: %v", a.created.ID, err)
		}
		want := a.body["standards"].([]map[string]any)
		if len(got.Standards) != len(want) {
			c.t.Errorf("key %s run %s: %d standards, want %d", key, a.created.ID, len(got.Standards), len(want))
			continue
		}
		for i, w := range want {
			g := got.Standards[i]
			if g.Level != w["level"] || g.Concentration != w["concentration"] || fmt.Sprint(g.Responses) != fmt.Sprint(w["responses"]) {
				c.t.Errorf("key %s run %s standard %d = %+v, want %v", key, a.created.ID, i, g, w)
			}
		}
		if len(got.Curves) != len(a.created.Curves) || got.Curves[0].ID != a.created.Curves[0].ID {
			c.t.Errorf("key %s run %s: curves %+v, want %+v", key, a.created.ID, got.Curves, a.created.Curves)
		}
	}
	return checked, lost
}

// ackedRun is a run the service answered 201 for.
type ackedRun struct {
	body    map[string]any
	created created
}

// loadResult is what a load generator saw.
type loadResult struct {
	mu       sync.Mutex
	acked    map[string]ackedRun // by Idempotency-Key
	bodies   map[string]map[string]any
	statuses map[int]int
	errors   map[string]int // transport errors by kind
	maxWait  time.Duration
	bad      []string // answers that break the rules of the test
}

func newLoadResult() *loadResult {
	return &loadResult{acked: map[string]ackedRun{}, bodies: map[string]map[string]any{},
		statuses: map[int]int{}, errors: map[string]int{}}
}

func (l *loadResult) summary() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return fmt.Sprintf("statuses %v, transport errors %v, slowest answer %s", l.statuses, l.errors, l.maxWait.Round(time.Millisecond))
}

// errKind names a transport error for the summary.
func errKind(err error) string {
	switch {
	case errors.Is(err, syscall.ECONNREFUSED):
		return "refused"
	case errors.Is(err, syscall.ECONNRESET):
		return "reset"
	case errors.Is(err, io.EOF), errors.Is(err, io.ErrUnexpectedEOF):
		return "eof"
	case strings.Contains(err.Error(), "Client.Timeout"):
		return "client-timeout"
	}
	return "other"
}

// postRuns posts runs first, first+1, ... with key prefix+i from workers
// goroutines until stop is closed or max runs are posted. allowed says
// which statuses other than 201 are acceptable; each one is checked to be
// problem details (with Retry-After for 503).
func (c *client) postRuns(base, token, prefix string, first, max, workers int, stop <-chan struct{}, res *loadResult, allowed ...int) {
	var wg sync.WaitGroup
	var next sync.Mutex
	i := first
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				select {
				case <-stop:
					return
				default:
				}
				next.Lock()
				n := i
				i++
				next.Unlock()
				if n >= first+max {
					return
				}
				key := prefix + strconv.Itoa(n)
				body := runBody(n)
				b, _ := json.Marshal(body)
				res.mu.Lock()
				res.bodies[key] = body
				res.mu.Unlock()
				r, err := c.do("POST", base+"/v1/runs", token, "application/json", b, "Idempotency-Key", key)
				res.record(key, body, r, err, allowed)
				if err == nil && r.status == http.StatusServiceUnavailable {
					time.Sleep(25 * time.Millisecond) // a client backs off; the test need not flood the log
				}
			}
		}()
	}
	wg.Wait()
}

func (l *loadResult) record(key string, body map[string]any, r reply, err error, allowed []int) {
	l.mu.Lock()
	defer l.mu.Unlock()
	if err != nil {
		l.errors[errKind(err)]++
		return
	}
	l.statuses[r.status]++
	l.maxWait = max(l.maxWait, r.elapsed)
	if r.status == http.StatusCreated {
		var c created
		if json.Unmarshal(r.body, &c) != nil || c.ID == "" {
			l.bad = append(l.bad, "201 without a run id: "+r.String())
			return
		}
		l.acked[key] = ackedRun{body: body, created: c}
		return
	}
	ok := false
	for _, a := range allowed {
		ok = ok || a == r.status
	}
	if !ok {
		l.bad = append(l.bad, fmt.Sprintf("key %s: %s", key, r))
		return
	}
	if ct := r.header.Get("Content-Type"); !strings.HasPrefix(ct, "application/problem+json") {
		l.bad = append(l.bad, fmt.Sprintf("key %s: %d with Content-Type %q", key, r.status, ct))
	}
	if r.status == http.StatusServiceUnavailable && r.header.Get("Retry-After") == "" {
		l.bad = append(l.bad, fmt.Sprintf("key %s: 503 without Retry-After", key))
	}
}

// retryAll posts every body again with its key, as a client that never saw
// an answer would, and checks that an acknowledged run is replayed, not
// stored again. It returns how many retries replayed a stored run.
func (c *client) retryAll(base, token string, res *loadResult) (replayed int) {
	c.t.Helper()
	for key, body := range res.bodies {
		r := c.must(http.StatusCreated, "POST", base+"/v1/runs", token, body, "Idempotency-Key", key)
		got := decodeCreated(c.t, r)
		if a, ok := res.acked[key]; ok {
			if got.ID != a.created.ID || r.header.Get("Idempotency-Replayed") != "true" {
				c.t.Errorf("retry of acknowledged key %s = run %s (replayed %q), want run %s replayed",
					key, got.ID, r.header.Get("Idempotency-Replayed"), a.created.ID)
			}
		}
		if r.header.Get("Idempotency-Replayed") == "true" {
			replayed++
		}
	}
	return replayed
}

// noProcessesIn waits until no process works in dir (a PostgreSQL data
// folder), so the test's folder can be removed.
func noProcessesIn(t *testing.T, dir string) {
	t.Helper()
	if runtime.GOOS != "linux" {
		return
	}
	deadline := time.Now().Add(30 * time.Second)
	for time.Now().Before(deadline) {
		busy := false
		ents, _ := os.ReadDir("/proc")
		for _, e := range ents {
			if cwd, err := os.Readlink("/proc/" + e.Name() + "/cwd"); err == nil && cwd == dir {
				busy = true
				break
			}
		}
		if !busy {
			return
		}
		time.Sleep(50 * time.Millisecond)
	}
	t.Errorf("processes still work in %s", dir)
}
