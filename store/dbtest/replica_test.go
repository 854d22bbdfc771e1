package dbtest

import (
	"context"
	"testing"

	"github.com/jackc/pgx/v5"
)

// TestReplicaPair checks what the pair promises: the migrated database on
// both sides, a write on the primary visible on the standby after CatchUp,
// the standby in recovery.
func TestReplicaPair(t *testing.T) {
	t.Parallel()
	p := NewReplicaPair(t, PairOptions{})
	ctx := context.Background()
	prim, err := pgx.Connect(ctx, p.PrimaryURL)
	if err != nil {
		t.Fatal(err)
	}
	defer prim.Close(ctx)
	if _, err := prim.Exec(ctx, `CREATE TABLE pair_probe (v int); INSERT INTO pair_probe VALUES (42)`); err != nil {
		t.Fatal(err)
	}
	p.CatchUp(t)
	sb, err := pgx.Connect(ctx, p.StandbyURL)
	if err != nil {
		t.Fatal(err)
	}
	defer sb.Close(ctx)
	var v int
	var inRecovery bool
	var version int64
	if err := sb.QueryRow(ctx, `SELECT (SELECT v FROM pair_probe), pg_is_in_recovery(), (SELECT version FROM schema_migrations)`).Scan(&v, &inRecovery, &version); err != nil {
		t.Fatal(err)
	}
	if v != 42 || !inRecovery || version == 0 {
		t.Errorf("standby: probe %d in_recovery %v schema %d, want 42, true and a migrated schema", v, inRecovery, version)
	}
}
