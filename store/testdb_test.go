package store_test

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"os"
	"testing"

	"github.com/jackc/pgx/v5"

	"curvekeeper/store"
)

// Until the shared harness lands, the tests make their own databases on the
// server at 127.0.0.1:5432: a template migrated once per package run, and a
// fresh copy of it per test.
const serverURL = "postgres://postgres@127.0.0.1:5432/postgres?sslmode=disable"

var templateName string

func TestMain(m *testing.M) {
	os.Exit(runTests(m))
}

func runTests(m *testing.M) int {
	ctx := context.Background()
	templateName = "ck_store_tmpl_" + randHex(4)
	if err := makeTemplate(ctx, templateName); err != nil {
		fmt.Fprintln(os.Stderr, "store tests:", err)
		return 1
	}
	defer dropDatabase(ctx, templateName)
	return m.Run()
}

func randHex(n int) string {
	b := make([]byte, n)
	_, _ = rand.Read(b)
	return hex.EncodeToString(b)
}

func adminExec(ctx context.Context, sql string) error {
	conn, err := pgx.Connect(ctx, serverURL)
	if err != nil {
		return err
	}
	defer conn.Close(ctx)
	_, err = conn.Exec(ctx, sql)
	return err
}

func dropDatabase(ctx context.Context, name string) {
	_ = adminExec(ctx, "DROP DATABASE IF EXISTS "+name+" WITH (FORCE)")
}

func makeTemplate(ctx context.Context, name string) error {
	up, err := os.ReadFile("../migrations/000001_core.up.sql")
	if err != nil {
		return err
	}
	if err := adminExec(ctx, "CREATE DATABASE "+name); err != nil {
		return err
	}
	conn, err := pgx.Connect(ctx, "postgres://postgres@127.0.0.1:5432/"+name+"?sslmode=disable")
	if err != nil {
		return err
	}
	defer conn.Close(ctx)
	if _, err := conn.PgConn().Exec(ctx, string(up)).ReadAll(); err != nil {
		return fmt.Errorf("migrate template: %w", err)
	}
	return nil
}

// newDB returns a store on a fresh migrated database, dropped after the test.
func newDB(t *testing.T) *store.DB {
	t.Helper()
	ctx := context.Background()
	name := "ck_store_test_" + randHex(6)
	if err := adminExec(ctx, "CREATE DATABASE "+name+" TEMPLATE "+templateName); err != nil {
		t.Fatalf("create test database: %v", err)
	}
	db, err := store.Open(ctx, "postgres://postgres@127.0.0.1:5432/"+name+"?sslmode=disable")
	if err != nil {
		t.Fatalf("open test database: %v", err)
	}
	t.Cleanup(func() {
		db.Close()
		dropDatabase(ctx, name)
	})
	return db
}
