package dbtest

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"curvekeeper/store/localpg"
)

// SyncStandbyName is the name (cluster_name, hence application_name) of the
// standby NewReplicaPair makes when PairOptions.Sync is set. The replication
// primary lists it in synchronous_standby_names from its start, so a session
// on the primary with synchronous_commit=remote_apply waits for that
// standby; sessions that keep the test clusters' synchronous_commit=off do
// not wait for anyone.
const SyncStandbyName = "ck_sync_standby"

// clusterSettings keep the replication clusters light: a primary and a
// standby start in about a second each on a loaded 2-core machine.
// max_connections must be as large on a standby as on its primary.
var clusterSettings = []string{"shared_buffers=16MB", "max_connections=60", "wal_level=replica", "max_wal_senders=20", "max_replication_slots=40"}

// Pair is a database on a private primary and a hot standby streaming it.
type Pair struct {
	PrimaryURL string // the test's database on the primary
	StandbyURL string // the same database on the standby (read-only until promoted)
	Primary    *localpg.Cluster
	Standby    *localpg.Cluster
}

// PairOptions configures NewReplicaPair.
type PairOptions struct {
	// Sync names the standby SyncStandbyName, so that sessions with
	// synchronous_commit=remote_apply on the primary wait until it has
	// applied their commits. Only one such standby runs at a time; another
	// test asking for one waits for the first to end.
	Sync bool
	// Slot names the physical replication slot the standby streams
	// through (ck_slot_<n> when empty); it is dropped from the primary when
	// the test ends. The slot keeps the WAL the standby still needs while
	// other tests' CREATE DATABASE fill and recycle segments fast.
	Slot string
}

// replication is the replication primary of one test binary: a private
// cluster of its own (also when DATABASE_URL names a server, since a
// standby needs a primary whose files this process can copy), started by
// the first NewReplicaPair and stopped by Main.
type replication struct {
	srv     *server
	counter int
}

var (
	replOnce sync.Once
	repl     *replication
	replErr  error
	syncMu   sync.Mutex // held while a Sync standby runs
	replMu   sync.Mutex // guards repl.counter
)

func getReplication() (*replication, error) {
	replOnce.Do(func() {
		ctx, cancel := context.WithTimeout(context.Background(), setupTimeout)
		defer cancel()
		r, err := setupReplication(ctx)
		mu.Lock()
		repl, replErr = r, err
		mu.Unlock()
	})
	return repl, replErr
}

func setupReplication(ctx context.Context) (*replication, error) {
	dir, err := os.MkdirTemp("", "curvekeeper-repl-")
	if err != nil {
		return nil, fmt.Errorf("dbtest: %w", err)
	}
	settings := append(append([]string(nil), clusterSettings...), "synchronous_standby_names="+SyncStandbyName)
	c, err := localpg.Start(ctx, localpg.Options{DataDir: filepath.Join(dir, "primary"), NoSync: true, Settings: settings})
	if err != nil {
		os.RemoveAll(dir)
		return nil, fmt.Errorf("dbtest: the replication primary did not start: %w", err)
	}
	s := &server{url: c.URL(), cluster: c, clusterDir: dir}
	if err := s.prepare(ctx); err != nil {
		s.close()
		return nil, err
	}
	return &replication{srv: s}, nil
}

func shutdownReplication() error {
	mu.Lock()
	defer mu.Unlock()
	if repl == nil {
		return nil
	}
	err := repl.srv.close()
	repl = nil
	return err
}

// NewReplicaPair returns a fresh migrated database on the replication
// primary and a new hot standby of that primary that has replayed it. The
// standby is the test's own (pausing its replay or promoting it touches no
// other test) and is stopped when the test ends, after which the database
// is dropped. It skips the test under -short and where no PostgreSQL
// programs are installed; other failures fail it.
func NewReplicaPair(t testing.TB, opt PairOptions) *Pair {
	t.Helper()
	if testing.Short() {
		t.Skip("dbtest: replication tests start a standby; skipped under -short")
	}
	r, err := getReplication()
	if errors.Is(err, localpg.ErrNoBinaries) {
		t.Skipf("dbtest: %v", err)
	}
	if err != nil {
		t.Fatal(err)
	}
	if opt.Sync {
		syncMu.Lock()
		t.Cleanup(syncMu.Unlock) // registered first, so it runs after the standby stops
	}
	replMu.Lock()
	r.counter++
	n := r.counter
	replMu.Unlock()

	p := &Pair{PrimaryURL: r.srv.newDatabase(t, r.srv.template), Primary: r.srv.cluster}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	name := fmt.Sprintf("ck_standby_%d", n)
	if opt.Slot == "" {
		opt.Slot = fmt.Sprintf("ck_slot_%d", n)
	}
	if opt.Sync {
		name = SyncStandbyName
	}
	t.Cleanup(func() {
		if _, err := r.srv.admin.Exec(context.Background(), `SELECT pg_drop_replication_slot($1)`, opt.Slot); err != nil {
			t.Errorf("dbtest: drop replication slot %s: %v", opt.Slot, err)
		}
	})
	// Other tests' CREATE DATABASE write WAL fast; a segment the copy
	// needs may be recycled before its slot holds it. Try again then.
	var sb *localpg.Cluster
	for attempt := 1; attempt <= 3; attempt++ {
		sb, err = localpg.StartStandby(ctx, r.srv.cluster, localpg.StandbyOptions{
			Options: localpg.Options{DataDir: filepath.Join(t.TempDir(), "standby"), NoSync: true, Settings: clusterSettings},
			Name:    name, Slot: opt.Slot})
		if err == nil || !strings.Contains(err.Error(), "has already been removed") {
			break
		}
		_, _ = r.srv.admin.Exec(ctx, `SELECT pg_drop_replication_slot(slot_name) FROM pg_replication_slots WHERE slot_name = $1`, opt.Slot)
	}
	if err != nil {
		t.Fatalf("dbtest: start standby: %v", err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		if err := sb.Stop(ctx); err != nil {
			t.Errorf("dbtest: stop standby: %v", err)
		}
	})
	p.Standby = sb
	if p.StandbyURL, err = withDatabase(sb.URL(), databaseOf(t, p.PrimaryURL)); err != nil {
		t.Fatal(err)
	}
	p.CatchUp(t)
	return p
}

// CatchUp waits until the standby has replayed everything the primary has
// written so far (its pg_current_wal_lsn now).
func (p *Pair) CatchUp(t testing.TB) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	lsn, err := p.Primary.CurrentLSN(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if err := p.Standby.WaitReplay(ctx, lsn); err != nil {
		t.Fatal(err)
	}
}

// databaseOf returns the database a connection string names.
func databaseOf(t testing.TB, connString string) string {
	t.Helper()
	cfg, err := pgconn.ParseConfig(connString)
	if err != nil {
		t.Fatalf("dbtest: parse database url: %v", err)
	}
	return cfg.Database
}

// StandbyCommits returns pg_stat_database.xact_commit of the test's
// database on the standby: the transactions the standby itself has counted
// there. A backend reports its counts when it exits, so the caller first
// closes its connections to that database (pgxpool's Reset or Close);
// StandbyCommits waits until no backend is left on it and the last one has
// had time to report, then reads the count from a session on another
// database, which adds nothing to it.
func (p *Pair) StandbyCommits(t testing.TB) int64 {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	cfg, err := pgx.ParseConfig(p.StandbyURL)
	if err != nil {
		t.Fatal(err)
	}
	name := cfg.Database
	cfg.Database = "postgres"
	conn, err := pgx.ConnectConfig(ctx, cfg)
	if err != nil {
		t.Fatalf("dbtest: connect to the standby: %v", err)
	}
	defer conn.Close(ctx)
	for {
		var n int
		if err := conn.QueryRow(ctx, `SELECT count(*) FROM pg_stat_activity WHERE datname = $1`, name).Scan(&n); err != nil {
			t.Fatalf("dbtest: standby backends: %v", err)
		}
		if n == 0 {
			break
		}
		select {
		case <-ctx.Done():
			t.Fatalf("dbtest: %d backends still on the standby's %s", n, name)
		case <-time.After(50 * time.Millisecond):
		}
	}
	// A backend leaves pg_stat_activity just before it reports its counts.
	time.Sleep(300 * time.Millisecond)
	var commits int64
	if err := conn.QueryRow(ctx, `SELECT coalesce((SELECT xact_commit FROM pg_stat_database WHERE datname = $1), 0)`, name).Scan(&commits); err != nil {
		t.Fatalf("dbtest: standby xact_commit: %v", err)
	}
	return commits
}
