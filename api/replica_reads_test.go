package api_test

import (
	"context"
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/api"
	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

// lagClock is the clock the replicas' lag is measured with: the tests move
// it, so the lag bound is crossed without waiting.
type lagClock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *lagClock) Now() time.Time { c.mu.Lock(); defer c.mu.Unlock(); return c.t }
func (c *lagClock) Advance(d time.Duration) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = c.t.Add(d)
}

// replicaEnv is a server on a pair's primary with its standby attached as
// the read replica (lag bound 10 s, the default), with the invented
// nitrate method, and a QA-page session.
type replicaEnv struct {
	*env
	pair     *dbtest.Pair
	clock    *lagClock
	replica  *store.DB // the replica's handle, for closing its connections
	poster   string    // runs:write
	reviewer string    // curves:review
	browser  *browser
}

func newReplicaEnv(t *testing.T) *replicaEnv {
	t.Helper()
	p := dbtest.NewReplicaPair(t, dbtest.PairOptions{})
	ctx := context.Background()
	clock := &lagClock{t: time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC)}
	db := openStore(t, p.PrimaryURL)
	if err := db.AttachReplicas(ctx, []string{p.StandbyURL}, store.ReplicaOptions{Now: clock.Now}); err != nil {
		t.Fatal(err)
	}
	e := &replicaEnv{env: newEnvDB(t, api.Config{}, db), pair: p, clock: clock}
	var err error
	if _, e.poster, err = db.CreateToken(ctx, "replica-poster", []string{lab.ScopeRunsWrite}, "test"); err != nil {
		t.Fatal(err)
	}
	if _, e.reviewer, err = db.CreateToken(ctx, "replica-reviewer", []string{lab.ScopeCurvesReview}, "test"); err != nil {
		t.Fatal(err)
	}
	e.method(t, "nitrate-uv", "nitrate")
	e.browser = (&uiEnv{db: db, srv: e.srv}).browser(t)
	e.browser.mustSignIn(e.reviewer)
	e.catchUp(t)
	if e.replica = db.Reader(); e.replica == db {
		t.Fatalf("the replica is not in use after catching up: %+v", db.Replicas())
	}
	return e
}

// catchUp waits until the standby has replayed everything and lets the
// service see it (one check, as Watch runs them).
func (e *replicaEnv) catchUp(t *testing.T) {
	t.Helper()
	e.pair.CatchUp(t)
	if err := e.db.Refresh(context.Background()); err != nil {
		t.Fatal(err)
	}
}

// postRun posts a nitrate run on photometer-7 acquired `hour` hours after
// baseTime, with samples, and returns the run and curve ids.
func (e *replicaEnv) postRun(t *testing.T, hour int, samples ...string) (runID, curveID string) {
	t.Helper()
	body := runBody("nitrate-uv", "photometer-7", baseTime.Add(time.Duration(hour)*time.Hour), standards("nitrate", uint64(hour+1)))
	var ss []map[string]any
	for i, id := range samples {
		ss = append(ss, map[string]any{"id": id, "analyte": "nitrate", "responses": []float64{1.1 + 0.1*float64(i)}})
	}
	if ss != nil {
		body["samples"] = ss
	}
	r := e.run(t, e.poster, body)
	return r.ID.String(), r.Curves[0].ID.String()
}

// pageGet fetches a QA page (or its plot) with the signed-in browser.
func (e *replicaEnv) pageGet(t *testing.T, path string) {
	t.Helper()
	if p := e.browser.get(path); p.status != http.StatusOK {
		t.Fatalf("GET %s: %d %s", path, p.status, snippet([]byte(p.body)))
	}
}

// routedRead is one lag-tolerant read: path builds its path for the i-th
// request (plots name a curve not read before: the server caches fitted
// curves, and a cached curve reads nothing).
type routedRead struct {
	name string
	path func(i int) string
	ui   bool
}

// standbyAdmin connects to the standby as the superuser (who may pause
// replay), on another database than the test's, so StandbyCommits does not
// wait for it.
func standbyAdmin(t *testing.T, p *dbtest.Pair) *pgx.Conn {
	t.Helper()
	cfg, err := pgx.ParseConfig(p.StandbyURL)
	if err != nil {
		t.Fatal(err)
	}
	cfg.Database = "postgres"
	sb, err := pgx.ConnectConfig(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { sb.Close(context.Background()) })
	return sb
}

func routedReads(runID, curveID, sampleID string, fresh func(i int) string) []routedRead {
	fixed := func(p string) func(int) string { return func(int) string { return p } }
	trend := "?instrument=photometer-7&analyte=nitrate"
	return []routedRead{
		{name: "curve history", path: fixed("/v1/curves?limit=5")},
		{name: "curve by id", path: fixed("/v1/curves/" + curveID)},
		{name: "run by id", path: fixed("/v1/runs/" + runID)},
		{name: "run results", path: fixed("/v1/runs/" + runID + "/results")},
		{name: "sample results", path: fixed("/v1/samples/" + sampleID)},
		{name: "curve audit trail", path: fixed("/v1/curves/" + curveID + "/audit")},
		{name: "audit search", path: fixed("/v1/audit?record_type=curve&record_id=" + curveID)},
		{name: "curve plot SVG", path: func(i int) string { return "/v1/curves/" + fresh(i) + "/plot.svg" }},
		{name: "curve plot PNG", path: func(i int) string { return "/v1/curves/" + fresh(i) + "/plot.png" }},
		{name: "trend", path: fixed("/v1/trends" + trend)},
		{name: "trend plot", path: fixed("/v1/trends/plot.svg" + trend)},
		{name: "change feed", path: fixed("/v1/results?limit=10")},
		{name: "top-down history", path: fixed("/v1/methods/nitrate-uv/top-down?analyte=nitrate&from=2026-03-01T00:00:00Z&to=2026-04-01T00:00:00Z")},
		{name: "QA curve list", path: fixed("/ui/curves"), ui: true},
		{name: "QA curve page", path: fixed("/ui/curves/" + curveID), ui: true},
		{name: "QA curve plot", path: func(i int) string { return "/ui/curves/" + fresh(i) + "/plot.svg" }, ui: true},
		{name: "QA trend page", path: fixed("/ui/trends" + trend), ui: true},
		{name: "QA trend plot", path: fixed("/ui/trends/plot.svg" + trend), ui: true},
	}
}

// TestLagTolerantReadsGoToReplica sends each lag-tolerant read (history,
// curves, runs and results by id, audit trails, plots, trends, the change
// feed, the QA pages) a few times and sees them counted in the standby's
// own pg_stat_database; then it stops the standby's replay, moves the
// clock past the 10 s lag bound, and sees the same reads served by the
// primary with nothing counted on the standby. In between it checks the QA
// pages' read-your-writes: the 303 after a review carries the write's
// position as a cookie, and the page it leads to is read where the review
// is visible, while a read without it is served by the lagging replica.
func TestLagTolerantReadsGoToReplica(t *testing.T) {
	t.Parallel()
	e := newReplicaEnv(t)
	ctx := context.Background()
	const n = 3
	runID, curveID := e.postRun(t, 0, "LIMS-0001", "LIMS-0002")
	var plotCurves []string // curves only plots read, each once
	for i := range 2 * 3 * n {
		_, id := e.postRun(t, i+1)
		plotCurves = append(plotCurves, id)
	}
	_, pending := e.postRun(t, 40)
	// A top-down history: a check standard and a reference material.
	if r := e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{"code": "CRM-R", "kind": "reference_material",
		"analyte": "nitrate", "unit": "mg/L", "value": 2.0, "tolerance": 0.02, "expires_at": "2030-01-01T00:00:00Z"}); r.status != http.StatusCreated {
		t.Fatalf("material: %s", r)
	}
	for _, v := range []map[string]any{{"level": "CCV"}, {"level": "CRM", "material": "CRM-R"}} {
		v["concentration"], v["responses"], v["kind"], v["acquired_at"] = 2.0, []float64{1.5}, "continuing", baseTime.Add(time.Hour).Format(time.RFC3339)
		if r := e.postJSON(t, e.admin, "/v1/curves/"+curveID+"/verifications", v); r.status != http.StatusCreated {
			t.Fatalf("verification: %s", r)
		}
	}
	e.catchUp(t)

	next := 0
	fresh := func(int) string { next++; return plotCurves[next-1] }
	reads := routedReads(runID, curveID, "LIMS-0001", fresh)
	send := func(r routedRead, i int) {
		t.Helper()
		if r.ui {
			e.pageGet(t, r.path(i))
			return
		}
		if got := e.get(t, e.admin, r.path(i)); got.status != http.StatusOK {
			t.Fatalf("%s: GET %s: %s", r.name, r.path(i), got)
		}
	}

	t.Run("within the bound: served by the replica", func(t *testing.T) {
		e.replica.Pool.Reset()
		before := e.pair.StandbyCommits(t)
		for _, r := range reads {
			for i := range n {
				send(r, i)
			}
			e.replica.Pool.Reset() // its backends exit and report their counts
			after := e.pair.StandbyCommits(t)
			if after-before < n {
				t.Errorf("%s: standby xact_commit grew by %d for %d reads, want at least %d", r.name, after-before, n, n)
			}
			t.Logf("%-18s standby xact_commit +%d for %d reads", r.name, after-before, n)
			before = after
		}
	})

	sb := standbyAdmin(t, e.pair)
	if _, err := sb.Exec(ctx, `SELECT pg_wal_replay_pause()`); err != nil {
		t.Fatal(err)
	}

	t.Run("a QA page after a review form reads its write", func(t *testing.T) {
		path := "/ui/curves/" + pending
		form := e.browser.get(path)
		if form.status != http.StatusOK || !strings.Contains(form.body, "Pending review") {
			t.Fatalf("curve page before the review: %d", form.status)
		}
		r := e.browser.post(path+"/review", url.Values{"csrf_token": {form.csrf(t)}, "decision": {"approve"}, "reason": {"replica test: levels fine"}})
		if r.status != http.StatusSeeOther {
			t.Fatalf("review: %d %s", r.status, snippet([]byte(r.body)))
		}
		if ck := findCookie(t, r.header, "ck_write_lsn"); ck.Value == "" {
			t.Fatal("the review's 303 carries no write position")
		}
		if _, err := e.pair.Primary.CurrentLSN(ctx); err != nil { // flush (the test cluster commits asynchronously)
			t.Fatal(err)
		}
		if err := e.db.Refresh(ctx); err != nil {
			t.Fatal(err)
		}
		if st := e.db.Replicas()[0]; !st.InUse {
			t.Fatalf("replica not in use right after the review: %+v", st)
		}
		primary := e.db.PrimaryReads()
		after := e.browser.get(r.header.Get("Location"))
		if after.status != http.StatusOK || !strings.Contains(after.body, "The curve was approved") || !strings.Contains(after.body, "st-approved") {
			t.Errorf("page after the review: %d, does not show the approval", after.status)
		}
		if e.db.PrimaryReads() == primary {
			t.Error("the page after the review was not read on the primary (the replica has not replayed the review)")
		}
		// Without the write's position the same curve comes from the
		// replica, as it was before the review: the lag the bound allows.
		c := e.get(t, e.admin, "/v1/curves/"+pending)
		if c.status != http.StatusOK || !strings.Contains(string(c.body), `"status":"pending_review"`) {
			t.Errorf("GET /v1/curves/%s without the write's position: %s, want the replica's pending_review", pending, c)
		}
	})

	t.Run("over the bound: served by the primary", func(t *testing.T) {
		// A write the paused standby does not replay; the next check sees
		// the primary ahead, and lag counts from there.
		e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": "lag-start", "scopes": []string{"results:read"}})
		if _, err := e.pair.Primary.CurrentLSN(ctx); err != nil {
			t.Fatal(err)
		}
		if err := e.db.Refresh(ctx); err != nil {
			t.Fatal(err)
		}
		e.clock.Advance(4 * time.Second)
		if err := e.db.Refresh(ctx); err != nil {
			t.Fatal(err)
		}
		e.clock.Advance(7 * time.Second)
		if err := e.db.Refresh(ctx); err != nil {
			t.Fatal(err)
		}
		if st := e.db.Replicas()[0]; st.InUse {
			t.Fatalf("replica still in use 11 s behind: %+v", st)
		}
		e.replica.Pool.Reset()
		before := e.pair.StandbyCommits(t)
		for _, r := range reads {
			primary := e.db.PrimaryReads()
			for i := range n {
				send(r, i)
			}
			if got := e.db.PrimaryReads() - primary; got < n {
				t.Errorf("%s: %d reads kept on the primary, want %d", r.name, got, n)
			}
		}
		e.replica.Pool.Reset()
		if after := e.pair.StandbyCommits(t); after != before {
			t.Errorf("standby xact_commit grew by %d while the replica lagged over the bound", after-before)
		}
	})
	if _, err := sb.Exec(ctx, `SELECT pg_wal_replay_resume()`); err != nil {
		t.Fatal(err)
	}
	if m := e.get(t, "", "/metrics"); !strings.Contains(string(m.body), fmt.Sprintf(`curvekeeper_replica_in_use{replica="1"} %d`, 0)) {
		t.Error("/metrics does not report the replica out of use")
	}
}
