package store_test

import (
	"context"
	"testing"

	"curvekeeper/store"
)

// TestHotStatementsKeepAGenericPlan runs each statement of the ingest and
// prediction paths 8 times on one connection, as pgx does (a named prepared
// statement), and checks in pg_prepared_statements that PostgreSQL went on
// to a generic plan. By its plan cache's rule (PostgreSQL 15 documentation,
// PREPARE, "plan_cache_mode"; recalled from memory, and seen to hold on
// PostgreSQL 15.19 with pg_prepared_statements) the first 5 executions are
// planned with the parameter values; a statement whose generic plan is
// estimated dearer is planned again at every execution, which cost about
// 0.1 ms of server CPU per token lookup under the ingest load
// (pg_stat_statements).
func TestHotStatementsKeepAGenericPlan(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	conn, err := db.Pool.Acquire(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Release()
	for _, c := range store.HotStatements() {
		for i := 0; i < 8; i++ {
			rows, err := conn.Query(ctx, c.SQL, c.Args...)
			if err != nil {
				t.Fatalf("%s: %v", c.Name, err)
			}
			rows.Close()
			if err := rows.Err(); err != nil {
				t.Fatalf("%s: %v", c.Name, err)
			}
		}
		var generic, custom int64
		err := conn.QueryRow(ctx, `SELECT generic_plans, custom_plans FROM pg_prepared_statements WHERE statement = $1`,
			c.SQL).Scan(&generic, &custom)
		if err != nil {
			t.Fatalf("%s: read pg_prepared_statements: %v", c.Name, err)
		}
		if generic == 0 {
			t.Errorf("%s: %d custom plans and no generic plan in 8 executions; PostgreSQL plans it at every call", c.Name, custom)
		}
	}
}
