package store_test

import (
	"context"
	"errors"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgconn"

	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

// openApp opens a fresh migrated database as the service does (OpenApp).
func openApp(t *testing.T) *store.DB {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	db, err := store.OpenApp(ctx, dbtest.NewURL(t))
	if err != nil {
		t.Fatalf("OpenApp: %v", err)
	}
	t.Cleanup(db.Close)
	return db
}

func currentUser(t *testing.T, db *store.DB) string {
	t.Helper()
	var u string
	if err := db.Pool.QueryRow(context.Background(), `SELECT current_user`).Scan(&u); err != nil {
		t.Fatal(err)
	}
	return u
}

// TestAppRoleCannotChangeAudit: the service's connections work as
// curvekeeper_app, which does every write of the service's own flow but is
// refused UPDATE, DELETE and TRUNCATE on audit by privilege (SQLSTATE 42501,
// insufficient_privilege), before any trigger runs.
func TestAppRoleCannotChangeAudit(t *testing.T) {
	t.Parallel()
	db := openApp(t)
	ctx := context.Background()
	if got := currentUser(t, db); got != store.AppRole {
		t.Fatalf("current_user = %q, want %q", got, store.AppRole)
	}

	// The whole write path works under the role.
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)
	created, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatalf("CreateRun as %s: %v", store.AppRole, err)
	}
	if _, err := db.ReviewCurve(ctx, created.Curves[0].ID, lab.DecisionApprove, "", "qa-test"); err != nil {
		t.Fatalf("ReviewCurve as %s: %v", store.AppRole, err)
	}
	id, secret, err := db.CreateToken(ctx, "lims", []string{lab.ScopeResultsRead}, "admin-test")
	if err != nil {
		t.Fatalf("CreateToken as %s: %v", store.AppRole, err)
	}
	if err := db.RevokeToken(ctx, id, "admin-test"); err != nil {
		t.Fatalf("RevokeToken as %s: %v", store.AppRole, err)
	}
	if _, err := db.LookupToken(ctx, secret); lab.KindOf(err) != lab.KindNotFound {
		t.Fatalf("LookupToken of a revoked token = %v, want KindNotFound", err)
	}
	if err := db.CheckSchema(ctx); err != nil {
		t.Fatalf("CheckSchema as %s: %v", store.AppRole, err)
	}

	before := count(t, db, "audit")
	if before == 0 {
		t.Fatal("no audit rows written")
	}
	for _, sql := range []string{
		`UPDATE audit SET actor = 'someone else'`,
		`DELETE FROM audit`,
		`TRUNCATE audit`,
		`UPDATE schema_migrations SET version = 1`,
		`CREATE TABLE scratch (v int)`,
	} {
		t.Run(sql, func(t *testing.T) {
			_, err := db.Pool.Exec(ctx, sql)
			var pgErr *pgconn.PgError
			if !errors.As(err, &pgErr) || pgErr.Code != "42501" {
				t.Fatalf("error = %v, want SQLSTATE 42501 (insufficient_privilege)", err)
			}
		})
	}
	if got := count(t, db, "audit"); got != before {
		t.Errorf("audit = %d rows, want %d unchanged", got, before)
	}
}

// TestOpenKeepsOwner: Open (migrations, tests, tools) keeps the login
// user's privileges.
func TestOpenKeepsOwner(t *testing.T) {
	t.Parallel()
	db := newDB(t)
	if got := currentUser(t, db); got == store.AppRole {
		t.Fatalf("current_user = %q, want the login user", got)
	}
}
