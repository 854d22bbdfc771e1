package localpg

import (
	"context"
	"errors"
	"path/filepath"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
)

// smallSettings keep a throwaway cluster light: two of them start in about
// a second on a loaded 2-core machine.
var smallSettings = []string{"shared_buffers=16MB", "max_connections=30"}

// TestStandbyReplicatesAndPromotes copies a primary into a streaming
// standby (with a replication slot), reads a committed row on the standby
// after waiting for its LSN, sees the standby refuse a write with SQLSTATE
// 25006, promotes it and writes on it.
func TestStandbyReplicatesAndPromotes(t *testing.T) {
	t.Parallel()
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	dir := t.TempDir()
	primary, err := Start(ctx, Options{DataDir: filepath.Join(dir, "primary"), NoSync: true, Settings: smallSettings})
	if err != nil {
		t.Fatalf("Start primary: %v", err)
	}
	t.Cleanup(func() { _ = primary.Stop(context.Background()) })
	exec1(t, primary.URL(), `CREATE TABLE kept (v text); INSERT INTO kept VALUES ('before the copy')`)

	standby, err := StartStandby(ctx, primary, StandbyOptions{
		Options: Options{DataDir: filepath.Join(dir, "standby"), NoSync: true, Settings: smallSettings},
		Name:    "ck_test_standby", Slot: "ck_test_slot"})
	if err != nil {
		t.Fatalf("StartStandby: %v", err)
	}
	t.Cleanup(func() { _ = standby.Stop(context.Background()) })
	if standby.SocketDir() == primary.SocketDir() {
		t.Fatalf("standby shares the primary's socket folder %s", primary.SocketDir())
	}
	if got := query(t, standby.URL(), `SELECT pg_is_in_recovery()::text`); got != "true" {
		t.Fatalf("standby pg_is_in_recovery() = %s, want true", got)
	}
	if got, want := query(t, primary.URL(), `SELECT application_name || ' ' || coalesce(s.slot_name, '-') FROM pg_stat_replication r LEFT JOIN pg_replication_slots s ON s.active_pid = r.pid`), "ck_test_standby ck_test_slot"; got != want {
		t.Errorf("primary's pg_stat_replication: %q, want %q", got, want)
	}

	exec1(t, primary.URL(), `INSERT INTO kept VALUES ('streamed')`)
	lsn, err := primary.CurrentLSN(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if err := standby.WaitReplay(ctx, lsn); err != nil {
		t.Fatal(err)
	}
	if got := query(t, standby.URL(), `SELECT string_agg(v, ',' ORDER BY v) FROM kept`); got != "before the copy,streamed" {
		t.Errorf("standby reads %q, want both rows", got)
	}

	conn, err := pgx.Connect(ctx, standby.URL())
	if err != nil {
		t.Fatal(err)
	}
	_, err = conn.Exec(ctx, `INSERT INTO kept VALUES ('refused')`)
	conn.Close(ctx)
	var pgErr *pgconn.PgError
	if !errors.As(err, &pgErr) || pgErr.Code != "25006" {
		t.Fatalf("write on the standby: %v, want SQLSTATE 25006 (read_only_sql_transaction)", err)
	}

	if err := standby.Promote(ctx); err != nil {
		t.Fatal(err)
	}
	if got := query(t, standby.URL(), `SELECT pg_is_in_recovery()::text`); got != "false" {
		t.Fatalf("after Promote pg_is_in_recovery() = %s, want false", got)
	}
	exec1(t, standby.URL(), `INSERT INTO kept VALUES ('after promotion')`)
	if got := query(t, standby.URL(), `SELECT count(*)::text FROM kept`); got != "3" {
		t.Errorf("promoted standby holds %s rows, want 3", got)
	}
}
