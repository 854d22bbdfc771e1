package api_test

import (
	"context"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"curvekeeper/api"
	"curvekeeper/api/oapi"
	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

// envOn serves db without storing a token (a standby refuses the write);
// the admin token must already be on the database.
func envOn(t *testing.T, db *store.DB) *env {
	t.Helper()
	logs := &syncBuffer{}
	s, err := api.New(api.Config{}, lab.NewService(db, testClock), slog.New(slog.NewJSONHandler(logs, nil)))
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(s.Handler())
	t.Cleanup(func() {
		srv.Close()
		if t.Failed() {
			t.Logf("server log:\n%s", tail(logs.String(), 6000))
		}
	})
	return &env{db: db, srv: srv, admin: bootstrapSecret, logs: logs}
}

func openStore(t *testing.T, url string) *store.DB {
	t.Helper()
	db, err := store.Open(context.Background(), url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(db.Close)
	return db
}

// adminOnBoth stores the bootstrap admin token on the primary and waits
// until the standby has it.
func adminOnBoth(t *testing.T, p *dbtest.Pair) {
	t.Helper()
	prim := openStore(t, p.PrimaryURL)
	if _, _, err := prim.EnsureToken(context.Background(), "bootstrap-admin", bootstrapSecret, []string{lab.ScopeAdmin}); err != nil {
		t.Fatal(err)
	}
	p.CatchUp(t)
}

// writeOperations lists every POST, PUT, PATCH and DELETE of the spec with
// its path parameters filled in.
func writeOperations(t *testing.T) [][2]string {
	t.Helper()
	doc, err := oapi.GetSwagger()
	if err != nil {
		t.Fatal(err)
	}
	fill := strings.NewReplacer("{id}", "0b6f6f8e-3f7a-4c52-9d1e-6a0c2f1e9b11", "{instrument}", "photometer-7")
	var ops [][2]string
	for path, item := range doc.Paths.Map() {
		for method := range item.Operations() {
			switch method {
			case http.MethodPost, http.MethodPut, http.MethodPatch, http.MethodDelete:
				ops = append(ops, [2]string{method, fill.Replace(path)})
			}
		}
	}
	return ops
}

// TestReadOnlyInstanceRefusesEveryWrite serves a standby: /readyz says
// read-only, reads work, every write operation of the spec and every POST
// of the QA pages answers 503 with Retry-After (never 500), while the two
// prediction routes, which store nothing, are served. After promotion and
// one check the same server writes.
func TestReadOnlyInstanceRefusesEveryWrite(t *testing.T) {
	t.Parallel()
	p := dbtest.NewReplicaPair(t, dbtest.PairOptions{})
	adminOnBoth(t, p)
	db := openStore(t, p.StandbyURL)
	if ro, err := db.InRecovery(context.Background()); err != nil || !ro {
		t.Fatalf("InRecovery = %v, %v", ro, err)
	}
	e := envOn(t, db)

	ready := decode[oapi.Readiness](t, e.do(t, call{method: "GET", path: "/readyz"}), http.StatusOK)
	if ready.Mode != oapi.ModeReadOnly {
		t.Errorf("/readyz mode %q, want read-only", ready.Mode)
	}
	if r := e.get(t, e.admin, "/v1/curves?limit=5"); r.status != http.StatusOK {
		t.Errorf("GET /v1/curves on the standby: %s", r)
	}

	ops := writeOperations(t)
	refused := 0
	for _, op := range ops {
		r := e.do(t, call{method: op[0], path: op[1], token: e.admin, contentType: "application/json", body: []byte(`{}`)})
		if strings.HasSuffix(op[1], "/predictions") {
			if r.status == http.StatusServiceUnavailable || r.status >= 500 {
				t.Errorf("%s %s (stores nothing) on the standby: %s", op[0], op[1], r)
			}
			continue
		}
		if r.status != http.StatusServiceUnavailable || r.header.Get("Retry-After") == "" || !strings.Contains(string(r.body), "serves reads only") {
			t.Errorf("%s %s on the standby: %s (Retry-After %q), want 503 problem saying it serves reads only", op[0], op[1], r, r.header.Get("Retry-After"))
			continue
		}
		refused++
	}
	for _, path := range []string{"/ui/sign-in", "/ui/sign-out", "/ui/curves/0b6f6f8e-3f7a-4c52-9d1e-6a0c2f1e9b11/review"} {
		req, _ := http.NewRequest(http.MethodPost, e.srv.URL+path, strings.NewReader("token=x"))
		req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
		resp, err := e.srv.Client().Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode != http.StatusServiceUnavailable || resp.Header.Get("Retry-After") == "" {
			t.Errorf("POST %s on the standby: %d (Retry-After %q), want 503", path, resp.StatusCode, resp.Header.Get("Retry-After"))
		} else {
			refused++
		}
	}
	t.Logf("read-only: %d write operations in the spec, %d writes refused with 503 (API and QA pages), predictions served", len(ops), refused)
	if strings.Contains(e.logs.String(), `"status":500`) {
		t.Error("a request answered 500")
	}
	if m := e.get(t, "", "/metrics"); !strings.Contains(string(m.body), "curvekeeper_read_only 1") {
		t.Error("/metrics lacks curvekeeper_read_only 1")
	}

	if err := p.Standby.Promote(context.Background()); err != nil {
		t.Fatal(err)
	}
	if err := db.Refresh(context.Background()); err != nil {
		t.Fatal(err)
	}
	if r := e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": "after-promotion", "scopes": []string{"results:read"}}); r.status != http.StatusCreated {
		t.Errorf("POST /v1/tokens after promotion: %s", r)
	}
	if ready := decode[oapi.Readiness](t, e.do(t, call{method: "GET", path: "/readyz"}), http.StatusOK); ready.Mode != oapi.ModeReadWrite {
		t.Errorf("/readyz after promotion: mode %q", ready.Mode)
	}
}

// TestWriteRefusedAsStandbyIs503: an instance that has not noticed its
// database became a standby (no check since) sends a write, PostgreSQL
// refuses it with 25006, and the client gets 503, not 500; the instance is
// read-only from then on.
func TestWriteRefusedAsStandbyIs503(t *testing.T) {
	t.Parallel()
	p := dbtest.NewReplicaPair(t, dbtest.PairOptions{})
	adminOnBoth(t, p)
	e := envOn(t, openStore(t, p.StandbyURL)) // no Refresh: takes itself for writable
	r := e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": "refused", "scopes": []string{"results:read"}})
	if r.status != http.StatusServiceUnavailable || r.header.Get("Retry-After") == "" {
		t.Fatalf("write refused by the standby: %s, want 503 with Retry-After", r)
	}
	if !e.db.ReadOnly() {
		t.Error("the instance did not switch to read-only")
	}
}

// TestHistoryReadsGoToReplica lists curves through a server whose store has
// the standby attached: the reads are counted on the replica; a client
// carrying its write's LSN (Curvekeeper-Write-LSN) is kept on the primary
// while the standby has not replayed it (replay paused).
func TestHistoryReadsGoToReplica(t *testing.T) {
	t.Parallel()
	p := dbtest.NewReplicaPair(t, dbtest.PairOptions{})
	ctx := context.Background()
	db := openStore(t, p.PrimaryURL)
	if err := db.AttachReplicas(ctx, []string{p.StandbyURL}, store.ReplicaOptions{}); err != nil {
		t.Fatal(err)
	}
	e := newEnvDB(t, api.Config{}, db)
	p.CatchUp(t)
	if err := db.Refresh(ctx); err != nil {
		t.Fatal(err)
	}
	const reads = 10
	for range reads {
		if r := e.get(t, e.admin, "/v1/curves?limit=5"); r.status != http.StatusOK {
			t.Fatalf("GET /v1/curves: %s", r)
		}
	}
	if got := db.Replicas()[0].Reads; got != reads {
		t.Errorf("replica reads %d, want %d", got, reads)
	}

	sb, err := pgx.Connect(ctx, p.StandbyURL)
	if err != nil {
		t.Fatal(err)
	}
	defer sb.Close(ctx)
	if _, err := sb.Exec(ctx, `SELECT pg_wal_replay_pause()`); err != nil {
		t.Fatal(err)
	}
	w := e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": "writer", "scopes": []string{"results:read"}})
	lsn := w.header.Get(api.HeaderWriteLSN)
	if w.status != http.StatusCreated || lsn == "" {
		t.Fatalf("POST /v1/tokens: %s, %s %q", w, api.HeaderWriteLSN, lsn)
	}
	if _, err := p.Primary.CurrentLSN(ctx); err != nil { // flush (the test cluster commits asynchronously)
		t.Fatal(err)
	}
	if err := db.Refresh(ctx); err != nil {
		t.Fatal(err)
	}
	before := db.PrimaryReads()
	r := e.do(t, call{method: "GET", path: "/v1/curves?limit=5", token: e.admin, header: map[string]string{api.HeaderWriteLSN: lsn}})
	if r.status != http.StatusOK || db.PrimaryReads() != before+1 {
		t.Errorf("read after the write: %s, primary reads %d → %d, want one more", r, before, db.PrimaryReads())
	}
	ready := decode[oapi.Readiness](t, e.do(t, call{method: "GET", path: "/readyz"}), http.StatusOK)
	if ready.Replicas == nil || len(*ready.Replicas) != 1 || !(*ready.Replicas)[0].InUse {
		t.Errorf("/readyz replicas %+v, want one in use (within the bound)", ready.Replicas)
	}
	if m := e.get(t, "", "/metrics"); !strings.Contains(string(m.body), `curvekeeper_replica_reads_total{replica="1"} 10`) ||
		!strings.Contains(string(m.body), `curvekeeper_replica_lag_seconds{replica="1"}`) {
		t.Errorf("/metrics lacks the replica's reads and lag")
	}
	if _, err := sb.Exec(ctx, `SELECT pg_wal_replay_resume()`); err != nil {
		t.Fatal(err)
	}
}
