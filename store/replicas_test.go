package store_test

import (
	"context"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

// fakeClock is the clock the replicas' lag is measured with in tests.
type fakeClock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *fakeClock) Now() time.Time { c.mu.Lock(); defer c.mu.Unlock(); return c.t }
func (c *fakeClock) Advance(d time.Duration) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = c.t.Add(d)
}

// openWithReplica opens the pair's primary with its standby attached as a
// read replica (lag bound 10 s, the default) and runs the first Refresh.
func openWithReplica(t *testing.T, p *dbtest.Pair, clock *fakeClock) *store.DB {
	t.Helper()
	ctx := context.Background()
	db, err := store.Open(ctx, p.PrimaryURL)
	if err != nil {
		t.Fatal(err)
	}
	if err := db.AttachReplicas(ctx, []string{p.StandbyURL}, store.ReplicaOptions{Now: clock.Now}); err != nil {
		db.Close()
		t.Fatal(err)
	}
	if err := db.Refresh(ctx); err != nil {
		db.Close()
		t.Fatal(err)
	}
	return db
}

// inRecovery asks the server a handle's pool reaches whether it is a standby.
func inRecovery(t *testing.T, db *store.DB) bool {
	t.Helper()
	var v bool
	if err := db.Pool.QueryRow(context.Background(), `SELECT pg_is_in_recovery()`).Scan(&v); err != nil {
		t.Fatal(err)
	}
	return v
}

// xactCommits reads pg_stat_database.xact_commit of the database url names,
// on the server it names, from a session on another database (so the
// reading adds nothing to the count).
func xactCommits(t *testing.T, url string) int64 {
	t.Helper()
	ctx := context.Background()
	cfg, err := pgx.ParseConfig(url)
	if err != nil {
		t.Fatal(err)
	}
	name := cfg.Database
	cfg.Database = "postgres"
	conn, err := pgx.ConnectConfig(ctx, cfg)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	var n int64
	if err := conn.QueryRow(ctx, `SELECT coalesce((SELECT xact_commit FROM pg_stat_database WHERE datname = $1), 0)`, name).Scan(&n); err != nil {
		t.Fatal(err)
	}
	return n
}

// TestReaderServesFromReplica sends reads through Reader and sees them
// counted on the standby's own pg_stat_database (backends flush their
// counts when they exit, so the pools are closed first).
func TestReaderServesFromReplica(t *testing.T) {
	t.Parallel()
	p := dbtest.NewReplicaPair(t, dbtest.PairOptions{})
	before := xactCommits(t, p.StandbyURL)
	db := openWithReplica(t, p, &fakeClock{})
	st := db.Replicas()
	if len(st) != 1 || !st[0].InUse || st[0].Lag != 0 {
		t.Fatalf("Replicas() = %+v, want one in use with lag 0", st)
	}
	const reads = 25
	ctx := context.Background()
	for range reads {
		r := db.Reader()
		if r == db {
			t.Fatal("Reader() returned the primary while the replica is in use")
		}
		if _, err := r.ListCurves(ctx, lab.CurveFilter{Instrument: "icp-1", Analyte: "Pb"}); err != nil {
			t.Fatal(err)
		}
	}
	if got := db.Replicas()[0].Reads; got != reads {
		t.Errorf("reads counted for the replica: %d, want %d", got, reads)
	}
	if !inRecovery(t, db.Reader()) {
		t.Error("the Reader handle's server is not in recovery")
	}
	db.Close()
	deadline := time.Now().Add(15 * time.Second)
	var grew int64
	for time.Now().Before(deadline) {
		if grew = xactCommits(t, p.StandbyURL) - before; grew >= reads {
			break
		}
		time.Sleep(50 * time.Millisecond)
	}
	if grew < reads {
		t.Errorf("standby's xact_commit grew by %d, want at least %d", grew, reads)
	}
	t.Logf("standby xact_commit grew by %d for %d reads through Reader", grew, reads)
}

// TestReplicaLagFallback pauses the standby's replay (pg_wal_replay_pause),
// writes on the primary and moves the injected clock: past the 10 s bound
// the replica gets no reads, and a client carrying its write's LSN is kept
// on the primary even within the bound. After replay resumes, the replica
// is used again.
func TestReplicaLagFallback(t *testing.T) {
	t.Parallel()
	p := dbtest.NewReplicaPair(t, dbtest.PairOptions{})
	clock := &fakeClock{t: time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC)}
	db := openWithReplica(t, p, clock)
	defer db.Close()
	ctx := context.Background()

	sb, err := pgx.Connect(ctx, p.StandbyURL) // superuser: may pause replay
	if err != nil {
		t.Fatal(err)
	}
	defer sb.Close(ctx)
	if _, err := sb.Exec(ctx, `SELECT pg_wal_replay_pause()`); err != nil {
		t.Fatal(err)
	}
	if _, _, err := db.EnsureToken(ctx, "lag-probe", "lag-probe-secret-0123456789abcdef", []string{"admin"}); err != nil {
		t.Fatal(err)
	}
	lsn, err := db.WriteLSN(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := p.Primary.CurrentLSN(ctx); err != nil { // flushes the write (the test cluster commits asynchronously)
		t.Fatal(err)
	}
	if err := db.Refresh(ctx); err != nil { // sees the primary ahead: lag starts counting now
		t.Fatal(err)
	}
	if st := db.Replicas()[0]; !st.InUse || st.Lag != 0 {
		t.Fatalf("right after the write: %+v, want in use, lag 0", st)
	}
	if r := db.ReaderAfter(lsn); r != db {
		t.Error("ReaderAfter(the write's LSN) chose the replica, which has not replayed it")
	}
	if r := db.Reader(); r == db {
		t.Error("Reader() kept a lag-tolerant read on the primary within the bound")
	}

	clock.Advance(4 * time.Second)
	if err := db.Refresh(ctx); err != nil {
		t.Fatal(err)
	}
	if st := db.Replicas()[0]; !st.InUse || st.Lag != 4*time.Second {
		t.Fatalf("4 s later: %+v, want in use with lag 4s", st)
	}
	clock.Advance(7 * time.Second)
	if err := db.Refresh(ctx); err != nil {
		t.Fatal(err)
	}
	st := db.Replicas()[0]
	if st.InUse || st.Lag != 11*time.Second {
		t.Fatalf("11 s later: %+v, want not in use with lag 11s", st)
	}
	fallbacks := db.PrimaryReads()
	r := db.Reader()
	if r != db || inRecovery(t, r) {
		t.Error("Reader() did not fall back to the primary past the bound")
	}
	if got := db.PrimaryReads(); got != fallbacks+1 {
		t.Errorf("PrimaryReads = %d, want %d", got, fallbacks+1)
	}

	if _, err := sb.Exec(ctx, `SELECT pg_wal_replay_resume()`); err != nil {
		t.Fatal(err)
	}
	p.CatchUp(t)
	clock.Advance(time.Second)
	if err := db.Refresh(ctx); err != nil {
		t.Fatal(err)
	}
	if st := db.Replicas()[0]; !st.InUse || st.Lag != 0 {
		t.Fatalf("after resume: %+v, want in use with lag 0", st)
	}
	if r := db.ReaderAfter(lsn); r == db {
		t.Error("ReaderAfter(the write's LSN) stayed on the primary after the replica replayed it")
	}
}

// TestReadOnlyUntilPromoted opens the standby as the service's only
// database: it is found in recovery, a write fails with 25006, which
// NoteError recognises; after promotion a Refresh makes it writable.
func TestReadOnlyUntilPromoted(t *testing.T) {
	t.Parallel()
	p := dbtest.NewReplicaPair(t, dbtest.PairOptions{})
	ctx := context.Background()
	db, err := store.Open(ctx, p.StandbyURL)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	// Before any check the DB takes itself for writable; the refusal
	// teaches it otherwise.
	if db.ReadOnly() {
		t.Fatal("ReadOnly before any check")
	}
	_, _, err = db.EnsureToken(ctx, "refused", "refused-secret-0123456789abcdef01", []string{"admin"})
	if !store.IsReadOnlyError(err) {
		t.Fatalf("write on the standby: %v, want SQLSTATE 25006", err)
	}
	if store.IsReadOnlyError(lab.Errorf(lab.KindConflict, "something else")) {
		t.Error("IsReadOnlyError matched an error without SQLSTATE 25006")
	}
	if !db.NoteError(err) || !db.ReadOnly() {
		t.Error("NoteError did not switch to read-only on 25006")
	}
	ro, err := db.InRecovery(ctx)
	if err != nil || !ro || !db.ReadOnly() {
		t.Fatalf("InRecovery = %v, %v; ReadOnly %v; want true", ro, err, db.ReadOnly())
	}
	if err := db.CheckSchema(ctx); err != nil {
		t.Errorf("CheckSchema on the standby: %v", err)
	}

	if err := p.Standby.Promote(ctx); err != nil {
		t.Fatal(err)
	}
	if err := db.Refresh(ctx); err != nil {
		t.Fatal(err)
	}
	if db.ReadOnly() {
		t.Fatal("still read-only after promotion and Refresh")
	}
	if _, _, err := db.EnsureToken(ctx, "after-promotion", "after-promotion-secret-0123456789", []string{"admin"}); err != nil {
		t.Fatalf("write after promotion: %v", err)
	}
}
