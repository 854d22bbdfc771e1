package main

// Fault tests against the real binary and real PostgreSQL: a SIGKILL of the
// service mid-load, a database outage under load, two replicas on one
// database, and SIGTERM during load. Each prints a summary line with its
// counts ("faults: ..."), which the README quotes.

import (
	"context"
	"encoding/json"
	"errors"
	"io"
	"net"
	"net/http"
	"net/url"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"curvekeeper/store"
	"curvekeeper/store/dbtest"
	"curvekeeper/store/localpg"
)

// shortTempDir is a fresh folder under the temp folder with a short path
// (a data folder's Unix socket path must stay under 108 bytes), removed
// when the test ends once no PostgreSQL process works in it.
func shortTempDir(t *testing.T) string {
	t.Helper()
	dir, err := os.MkdirTemp("", "ckf")
	if err != nil {
		t.Fatal(err)
	}
	if real, err := filepath.EvalSymlinks(dir); err == nil {
		dir = real
	}
	t.Cleanup(func() {
		noProcessesIn(t, filepath.Join(dir, "pgdata"))
		noProcessesIn(t, filepath.Join(dir, "db", "pgdata"))
		os.RemoveAll(dir)
	})
	return dir
}

// clusterURL is the URL of the private cluster a service runs in dataDir
// (store/localpg's layout).
func clusterURL(dataDir string) string {
	return "postgres://postgres@/" + localpg.Database + "?host=" + url.QueryEscape(filepath.Join(dataDir, "run")) + "&port=5432&sslmode=disable"
}

// waitFor polls cond every 20 ms until it holds or d passes.
func waitFor(t *testing.T, d time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(d)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("waited %s for %s", d, what)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

func (l *loadResult) ackedCount() int {
	l.mu.Lock()
	defer l.mu.Unlock()
	return len(l.acked)
}

func (l *loadResult) status(code int) int {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.statuses[code]
}

func (l *loadResult) checkBad(t *testing.T) {
	t.Helper()
	l.mu.Lock()
	defer l.mu.Unlock()
	for i, b := range l.bad {
		if i == 10 {
			t.Errorf("... and %d more", len(l.bad)-10)
			break
		}
		t.Errorf("answer breaks the rule: %s", b)
	}
}

// TestCrashLosesNothing posts runs from four clients with Idempotency-Keys,
// kills the service with SIGKILL once 25 are acknowledged, restarts it on
// the same data folder (its private PostgreSQL outlives the kill for a
// moment; the new start must wait for it), and checks that every run
// answered 201 is stored complete and unchanged, that no run is stored
// half, and that retrying every key creates no duplicate.
func TestCrashLosesNothing(t *testing.T) {
	bin := buildBinary(t)
	dataDir := shortTempDir(t)
	admin := newSecret(t)
	env := []string{"CURVEKEEPER_DATA_DIR=" + dataDir, "CURVEKEEPER_BOOTSTRAP_TOKEN=" + admin}
	svc := startProc(t, bin, env, "--request-timeout", "20s", "--rate-limit", "0")
	c := newClient(t, nil)
	c.must(http.StatusCreated, "POST", svc.base+"/v1/methods", admin, methodBody())
	_, inst := c.issueToken(svc.base, admin, "ic-02-uploader", "runs:write")

	res := newLoadResult()
	stop := make(chan struct{})
	loaded := make(chan struct{})
	go func() {
		defer close(loaded)
		c.postRuns(svc.base, inst, "crash-", 0, 1000, 4, stop, res)
	}()
	waitFor(t, 60*time.Second, "25 acknowledged runs", func() bool { return res.ackedCount() >= 25 })
	svc.kill() // SIGKILL, mid-load
	close(stop)
	<-loaded
	res.checkBad(t)
	t.Logf("before the kill: %s", res.summary())

	svc2 := startProc(t, bin, env, "--request-timeout", "20s", "--rate-limit", "0")
	pool := openPool(t, clusterURL(dataDir))
	before := checkStoredIntegrity(t, pool)
	checked, lost := c.checkAcknowledged(svc2.base, admin, res.acked)
	replayed := c.retryAll(svc2.base, inst, res)
	after := checkStoredIntegrity(t, pool)
	var keys int
	if err := pool.QueryRow(context.Background(), `SELECT count(*) FROM idempotency_keys`).Scan(&keys); err != nil {
		t.Fatal(err)
	}
	if after != len(res.bodies) || keys != len(res.bodies) {
		t.Errorf("after retrying %d keys: %d runs and %d idempotency keys, want %d of each (no duplicate)", len(res.bodies), after, keys, len(res.bodies))
	}
	if replayed < checked {
		t.Errorf("%d retries replayed a stored run, want at least the %d acknowledged", replayed, checked)
	}
	pool.Close()
	svc2.signal(syscall.SIGTERM)
	if err := svc2.wait(60 * time.Second); err != nil {
		t.Errorf("restarted service exited with %v\n%s", err, tailLines(svc2.stderr.String(), 10))
	}
	t.Logf("faults: crash: 1 SIGKILL mid-load; posts %d, acknowledged %d, checked %d, lost %d; stored before retry %d (committed but unanswered %d); retried %d keys (%d replayed), runs after retry %d",
		len(res.bodies), len(res.acked), checked, lost, before, before-len(res.acked), len(res.bodies), replayed, after)
}

// TestDatabaseOutage crashes PostgreSQL (immediate shutdown, SIGQUIT: it
// recovers from its WAL on the next start) under load. While it is down
// every answer must be 503 problem details with Retry-After, within the
// request timeout, and /readyz must fail; once it is back the same
// service process must recover by itself, and no acknowledged run may be
// lost.
func TestDatabaseOutage(t *testing.T) {
	bin := buildBinary(t)
	dir := shortTempDir(t)
	dbDir := filepath.Join(dir, "db")
	ctx := context.Background()
	cl, err := localpg.Start(ctx, localpg.Options{DataDir: dbDir})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = cl.Stop(context.Background()) })

	const requestTimeout = 5 * time.Second
	admin := newSecret(t)
	env := []string{"DATABASE_URL=" + cl.URL(), "CURVEKEEPER_BOOTSTRAP_TOKEN=" + admin}
	svc := startProc(t, bin, env, "--request-timeout", requestTimeout.String(), "--rate-limit", "0")
	c := newClient(t, nil)
	c.must(http.StatusCreated, "POST", svc.base+"/v1/methods", admin, methodBody())
	_, inst := c.issueToken(svc.base, admin, "ic-02-uploader", "runs:write")
	c.must(http.StatusOK, "GET", svc.base+"/readyz", "", nil)

	// Phase 1: load on a healthy database.
	res := newLoadResult()
	stop := make(chan struct{})
	loaded := make(chan struct{})
	go func() {
		defer close(loaded)
		c.postRuns(svc.base, inst, "outage-", 0, 100000, 3, stop, res, http.StatusServiceUnavailable)
	}()
	waitFor(t, 60*time.Second, "10 acknowledged runs", func() bool { return res.ackedCount() >= 10 })

	// Phase 2: the database crashes under load.
	if err := syscall.Kill(cl.PID(), syscall.SIGQUIT); err != nil {
		t.Fatal(err)
	}
	_ = cl.Stop(ctx) // reaps the server and releases the data folder; it reports the exit
	ackedAtCrash := res.ackedCount()
	unavailableBefore := res.status(http.StatusServiceUnavailable)
	waitFor(t, 60*time.Second, "10 answers 503 while the database is down", func() bool {
		return res.status(http.StatusServiceUnavailable) >= unavailableBefore+10
	})
	r, err := c.do("GET", svc.base+"/readyz", "", "", nil)
	if err != nil {
		t.Fatal(err)
	}
	if r.status != http.StatusServiceUnavailable {
		t.Errorf("/readyz with the database down = %s, want 503", r)
	} else {
		problem(t, r)
	}
	if r.elapsed > requestTimeout {
		t.Errorf("/readyz took %s with the database down, want under the request timeout %s", r.elapsed, requestTimeout)
	}
	ackedDuringOutage := res.ackedCount() - ackedAtCrash

	// Phase 3: the database returns; the service must recover by itself.
	cl, err = localpg.Start(ctx, localpg.Options{DataDir: dbDir})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = cl.Stop(context.Background()) })
	waitFor(t, 60*time.Second, "/readyz to answer 200 again", func() bool {
		r, err := c.do("GET", svc.base+"/readyz", "", "", nil)
		return err == nil && r.status == http.StatusOK
	})
	recovered := res.ackedCount()
	waitFor(t, 60*time.Second, "10 more acknowledged runs after recovery", func() bool { return res.ackedCount() >= recovered+10 })
	close(stop)
	<-loaded
	res.checkBad(t)
	if res.maxWait > requestTimeout+5*time.Second {
		t.Errorf("slowest answer took %s, want within the request timeout %s (and a margin)", res.maxWait, requestTimeout)
	}
	if len(res.errors) != 0 {
		t.Errorf("transport errors %v: the service must answer, not drop the connection", res.errors)
	}

	pool := openPool(t, cl.URL())
	checkStoredIntegrity(t, pool)
	checked, lost := c.checkAcknowledged(svc.base, admin, res.acked)
	replayed := c.retryAll(svc.base, inst, res)
	var runs int
	if err := pool.QueryRow(ctx, `SELECT count(*) FROM runs`).Scan(&runs); err != nil {
		t.Fatal(err)
	}
	if runs != len(res.bodies) {
		t.Errorf("%d runs after retrying %d keys, want %d", runs, len(res.bodies), len(res.bodies))
	}
	if strings.Contains(svc.stderr.String(), `"status":500`) {
		t.Errorf("the service answered 500 during the outage:\n%s", grepLines(svc.stderr.String(), `"msg":"request failed"`, 5))
	}
	t.Logf("faults: outage: 1 PostgreSQL crash (SIGQUIT) under load; %s; acknowledged %d (%d while down), checked %d, lost %d; retried %d keys (%d replayed)",
		res.summary(), len(res.acked), ackedDuringOutage, checked, lost, len(res.bodies), replayed)
}

func grepLines(s, sub string, n int) string {
	var out []string
	for _, l := range strings.Split(s, "\n") {
		if strings.Contains(l, sub) && len(out) < n {
			out = append(out, l)
		}
	}
	return strings.Join(out, "\n")
}

// TestTwoReplicas starts two service processes together on one empty
// database (both migrate: the migration lock must let the schema be
// applied once), posts every run to both at once with the same
// Idempotency-Key, and reviews every curve on both at once: one run per
// key, and of each pair of reviews one 200 and one 409.
func TestTwoReplicas(t *testing.T) {
	bin := buildBinary(t)
	dbURL := dbtest.NewEmptyURL(t)
	admin := newSecret(t)
	env := []string{"DATABASE_URL=" + dbURL, "CURVEKEEPER_BOOTSTRAP_TOKEN=" + admin}
	a := launchProc(t, bin, env, "--rate-limit", "0")
	b := launchProc(t, bin, env, "--rate-limit", "0")
	a.ready()
	b.ready()
	replicas := []*proc{a, b}

	pool := openPool(t, dbURL)
	ctx := context.Background()
	v, dirty, err := store.SchemaVersion(ctx, dbURL)
	if err != nil || dirty || v != store.LatestVersion() {
		t.Fatalf("schema version %d dirty %v (%v), want %d clean", v, dirty, err, store.LatestVersion())
	}

	c := newClient(t, nil)
	c.must(http.StatusCreated, "POST", a.base+"/v1/methods", admin, methodBody())
	_, inst := c.issueToken(a.base, admin, "ic-02-uploader", "runs:write")
	_, qa := c.issueToken(b.base, admin, "qa-desk", "curves:review")

	const runs = 30
	var mu sync.Mutex
	ids := map[int][]string{}
	var curveIDs []string
	var wg sync.WaitGroup
	for i := range runs {
		for _, s := range replicas {
			wg.Add(1)
			go func() {
				defer wg.Done()
				body, _ := json.Marshal(runBody(i))
				r, err := c.do("POST", s.base+"/v1/runs", inst, "application/json", body, "Idempotency-Key", "twin-"+strconv.Itoa(i))
				mu.Lock()
				defer mu.Unlock()
				if err != nil || r.status != http.StatusCreated {
					t.Errorf("run %d on %s: %v %s", i, s.base, err, r)
					return
				}
				var cr created
				if err := json.Unmarshal(r.body, &cr); err != nil {
					t.Errorf("run %d: %v", i, err)
					return
				}
				if len(ids[i]) == 0 {
					curveIDs = append(curveIDs, cr.Curves[0].ID)
				}
				ids[i] = append(ids[i], cr.ID)
			}()
		}
	}
	wg.Wait()
	for i, got := range ids {
		if len(got) != 2 || got[0] != got[1] {
			t.Errorf("run %d: ids %v from the two replicas, want one run", i, got)
		}
	}
	statuses := map[int]int{}
	for _, id := range curveIDs {
		for j, s := range replicas {
			wg.Add(1)
			go func() {
				defer wg.Done()
				decision := []string{"approve", "reject"}[j]
				body, _ := json.Marshal(map[string]any{"decision": decision, "reason": "checked by the invented QA desk"})
				r, err := c.do("POST", s.base+"/v1/curves/"+id+"/review", qa, "application/json", body)
				mu.Lock()
				defer mu.Unlock()
				if err != nil {
					t.Errorf("review %s: %v", id, err)
					return
				}
				statuses[r.status]++
				if r.status == http.StatusConflict {
					problem(t, r)
				}
			}()
		}
	}
	wg.Wait()
	if statuses[http.StatusOK] != len(curveIDs) || statuses[http.StatusConflict] != len(curveIDs) {
		t.Errorf("review answers %v for %d curves reviewed twice, want %d × 200 and %d × 409", statuses, len(curveIDs), len(curveIDs), len(curveIDs))
	}
	var stored, reviews, reviewAudits int
	for _, q := range []struct {
		sql string
		out *int
	}{
		{`SELECT count(*) FROM runs`, &stored},
		{`SELECT count(*) FROM reviews`, &reviews},
		{`SELECT count(*) FROM audit WHERE action = 'curve.review'`, &reviewAudits},
	} {
		if err := pool.QueryRow(ctx, q.sql).Scan(q.out); err != nil {
			t.Fatal(err)
		}
	}
	if stored != runs || reviews != len(curveIDs) || reviewAudits != len(curveIDs) {
		t.Errorf("stored %d runs, %d reviews, %d review audit rows; want %d, %d, %d", stored, reviews, reviewAudits, runs, len(curveIDs), len(curveIDs))
	}
	checkStoredIntegrity(t, pool)
	t.Logf("faults: replicas: 2 processes migrating one empty database together (schema %d, clean); %d runs posted twice → %d stored; %d curves reviewed twice → %v",
		v, runs, stored, len(curveIDs), statuses)
}

// TestShutdownDrains sends SIGTERM while a request is in flight (its body
// half sent) and load runs: the service must stop accepting connections,
// still answer the in-flight request, and exit 0 within the deadline; every
// answer under load is 201, and every acknowledged run is stored.
func TestShutdownDrains(t *testing.T) {
	bin := buildBinary(t)
	dbURL := dbtest.NewURL(t)
	admin := newSecret(t)
	env := []string{"DATABASE_URL=" + dbURL, "CURVEKEEPER_BOOTSTRAP_TOKEN=" + admin}
	svc := startProc(t, bin, env, "--shutdown-timeout", "30s", "--rate-limit", "0")
	c := newClient(t, nil)
	c.must(http.StatusCreated, "POST", svc.base+"/v1/methods", admin, methodBody())
	_, inst := c.issueToken(svc.base, admin, "ic-02-uploader", "runs:write")

	// The in-flight request: Expect: 100-continue makes the client send
	// the body only once the handler reads it, so once the first half is
	// taken the request is being served.
	pr, pw := io.Pipe()
	slowTr := http.DefaultTransport.(*http.Transport).Clone()
	slowTr.ExpectContinueTimeout = time.Minute
	slow := newClient(t, slowTr)
	req, err := http.NewRequest("POST", svc.base+"/v1/runs", pr)
	if err != nil {
		t.Fatal(err)
	}
	req.Header.Set("Authorization", "Bearer "+inst)
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("Expect", "100-continue")
	req.Header.Set("Idempotency-Key", "slow-1")
	slowBody, _ := json.Marshal(runBody(9999))
	req.ContentLength = int64(len(slowBody))
	type answer struct {
		resp *http.Response
		body []byte
		err  error
	}
	slowDone := make(chan answer, 1)
	go func() {
		resp, err := slow.http.Do(req)
		a := answer{resp: resp, err: err}
		if err == nil {
			a.body, a.err = io.ReadAll(resp.Body)
			resp.Body.Close()
		}
		slowDone <- a
	}()
	half := len(slowBody) / 2
	if _, err := pw.Write(slowBody[:half]); err != nil {
		t.Fatal(err)
	}

	res := newLoadResult()
	stop := make(chan struct{})
	loaded := make(chan struct{})
	go func() {
		defer close(loaded)
		c.postRuns(svc.base, inst, "drain-", 0, 100000, 3, stop, res)
	}()
	waitFor(t, 60*time.Second, "10 acknowledged runs", func() bool { return res.ackedCount() >= 10 })
	svc.signal(syscall.SIGTERM)
	host := strings.TrimPrefix(svc.base, "http://")
	waitFor(t, 30*time.Second, "the listener to refuse connections", func() bool {
		conn, err := net.Dial("tcp", host)
		if err == nil {
			conn.Close()
			return false
		}
		return errors.Is(err, syscall.ECONNREFUSED)
	})
	select {
	case a := <-slowDone:
		t.Fatalf("the in-flight request ended before its body was sent: %v", a.err)
	default:
	}
	if _, err := pw.Write(slowBody[half:]); err != nil {
		t.Fatalf("finish the in-flight body: %v", err)
	}
	pw.Close()
	a := <-slowDone
	if a.err != nil || a.resp.StatusCode != http.StatusCreated {
		t.Fatalf("in-flight request after SIGTERM: %v %v %s", a.err, a.resp, a.body)
	}
	var slowRun created
	if err := json.Unmarshal(a.body, &slowRun); err != nil {
		t.Fatal(err)
	}
	if err := svc.wait(60 * time.Second); err != nil {
		t.Errorf("service exited with %v after SIGTERM, want 0\n%s", err, tailLines(svc.stderr.String(), 10))
	}
	if !strings.Contains(svc.stdout.String(), "curvekeeper: stopped") {
		t.Errorf("no \"stopped\" line:\n%s", svc.stdout)
	}
	close(stop)
	<-loaded
	res.checkBad(t)
	res.mu.Lock()
	for kind := range res.errors {
		if kind != "refused" {
			t.Errorf("transport errors %v, want only refused connections after the listener closed", res.errors)
		}
	}
	res.mu.Unlock()

	pool := openPool(t, dbURL)
	checkStoredIntegrity(t, pool)
	var n int
	if err := pool.QueryRow(context.Background(), `SELECT count(*) FROM runs WHERE id = $1`, slowRun.ID).Scan(&n); err != nil || n != 1 {
		t.Errorf("in-flight run %s stored %d times (%v), want 1", slowRun.ID, n, err)
	}
	missing := 0
	for key, ar := range res.acked {
		if err := pool.QueryRow(context.Background(), `SELECT count(*) FROM runs WHERE id = $1`, ar.created.ID).Scan(&n); err != nil || n != 1 {
			t.Errorf("acknowledged run %s (key %s) stored %d times (%v)", ar.created.ID, key, n, err)
			missing++
		}
	}
	t.Logf("faults: shutdown: 1 SIGTERM under load with 1 request in flight (answered %d after the listener closed); %s; acknowledged %d, checked %d, lost %d",
		a.resp.StatusCode, res.summary(), len(res.acked)+1, len(res.acked)+1, missing)
}
