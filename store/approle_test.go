package store_test

import (
	"context"
	"errors"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
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

// TestLoginRoleCannotRegainOwner: the service logs in as store.LoginRole,
// which is neither superuser nor a member of the tables' owner. What an
// injected statement could try to get the owner's rights back (RESET ROLE,
// SET ROLE or SET SESSION AUTHORIZATION to the owner or a superuser) is
// refused, and after RESET ROLE the connection still may not touch the
// audit trail or the schema. Before the login role, the service logged in
// as the owner and RESET ROLE gave every right back.
func TestLoginRoleCannotRegainOwner(t *testing.T) {
	t.Parallel()
	db := dbtest.NewAppDB(t)
	ctx := context.Background()
	if got := currentUser(t, db); got != store.AppRole {
		t.Fatalf("current_user = %q, want %q", got, store.AppRole)
	}
	p, err := db.LoginPrivilege(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if p.User != store.LoginRole || p.Risky() {
		t.Fatalf("login privilege = %+v, want %s, neither superuser nor owner", p, store.LoginRole)
	}
	var owner string
	if err := db.Pool.QueryRow(ctx, `SELECT tableowner FROM pg_tables WHERE tablename = 'audit'`).Scan(&owner); err != nil {
		t.Fatal(err)
	}

	// The service's whole write path works as the login role.
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)
	if _, err := db.CreateRun(ctx, in, curves); err != nil {
		t.Fatalf("CreateRun as %s: %v", store.LoginRole, err)
	}
	before := count(t, db, "audit")

	conn, err := db.Pool.Acquire(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Release()
	defer conn.Conn().Close(ctx) // its role was reset: do not return it to the pool
	if _, err := conn.Exec(ctx, `RESET ROLE`); err != nil {
		t.Fatalf("RESET ROLE: %v", err)
	}
	var cur string
	if err := conn.QueryRow(ctx, `SELECT current_user`).Scan(&cur); err != nil || cur != store.LoginRole {
		t.Fatalf("after RESET ROLE current_user = %q (%v), want %s", cur, err, store.LoginRole)
	}
	for _, sql := range []string{
		`SET ROLE ` + pgx.Identifier{owner}.Sanitize(),
		`SET ROLE postgres`,
		`SET SESSION AUTHORIZATION ` + pgx.Identifier{owner}.Sanitize(),
		`UPDATE audit SET actor = 'someone else'`,
		`DELETE FROM audit`,
		`TRUNCATE audit`,
		`ALTER TABLE audit DISABLE TRIGGER ALL`,
		`DROP TABLE audit`,
		`UPDATE schema_migrations SET version = 1`,
		`CREATE TABLE scratch (v int)`,
	} {
		_, err := conn.Exec(ctx, sql)
		var pgErr *pgconn.PgError
		if !errors.As(err, &pgErr) || (pgErr.Code != "42501" && pgErr.Code != "42704") {
			t.Errorf("%s: error = %v, want SQLSTATE 42501 (insufficient_privilege) or 42704 (no such role)", sql, err)
		}
	}
	if got := count(t, db, "audit"); got != before {
		t.Errorf("audit = %d rows, want %d unchanged", got, before)
	}
}
