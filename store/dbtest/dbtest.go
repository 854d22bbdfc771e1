// Package dbtest gives tests a real PostgreSQL database, never a mock. It is
// imported only from _test files.
//
// The server is the one named by DATABASE_URL when that is set; otherwise a
// private cluster (store/localpg) in a temporary folder, started once per
// test binary and stopped by Main. A template database is migrated once per
// schema (its name carries a hash of the embedded migrations) and every
// NewDB/NewURL call copies it into a database of its own, dropped when the
// test ends, so tests are independent and may call t.Parallel.
//
// Each package that uses it has
//
//	func TestMain(m *testing.M) { dbtest.Main(m) }
package dbtest

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io/fs"
	"net/url"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgxpool"

	"curvekeeper/migrations"
	"curvekeeper/store"
	"curvekeeper/store/localpg"
)

// templateLockKey names the advisory lock that serialises template builds
// across test binaries sharing one server (go test ./... runs packages in
// parallel).
const templateLockKey int64 = 0x636b5f746d706c // "ck_tmpl"

// setupTimeout bounds starting the server and building the template.
const setupTimeout = 3 * time.Minute

// server is the shared state of one test binary.
type server struct {
	url      string // admin URL: DATABASE_URL or the private cluster's
	admin    *pgxpool.Pool
	template string

	cluster    *localpg.Cluster // nil when DATABASE_URL is used
	clusterDir string
}

var (
	once     sync.Once
	shared   *server
	setupErr error
	mu       sync.Mutex // guards shared against Main's shutdown
)

// Main runs the tests, then stops the private cluster if one was started,
// and exits with the tests' status.
func Main(m *testing.M) {
	code := m.Run()
	if err := errors.Join(shutdown(), shutdownReplication()); err != nil {
		fmt.Fprintln(os.Stderr, "dbtest:", err)
		if code == 0 {
			code = 1
		}
	}
	os.Exit(code)
}

func get() (*server, error) {
	once.Do(func() {
		ctx, cancel := context.WithTimeout(context.Background(), setupTimeout)
		defer cancel()
		s, err := setup(ctx)
		mu.Lock()
		shared, setupErr = s, err
		mu.Unlock()
	})
	return shared, setupErr
}

func setup(ctx context.Context) (*server, error) {
	s := &server{url: os.Getenv("DATABASE_URL")}
	if s.url == "" {
		dir, err := os.MkdirTemp("", "curvekeeper-test-")
		if err != nil {
			return nil, fmt.Errorf("dbtest: %w", err)
		}
		c, err := localpg.Start(ctx, localpg.Options{DataDir: filepath.Join(dir, "data"), NoSync: true})
		if err != nil {
			os.RemoveAll(dir)
			return nil, fmt.Errorf("dbtest: DATABASE_URL is not set and the private cluster did not start: %w", err)
		}
		s.cluster, s.clusterDir, s.url = c, dir, c.URL()
	}
	if err := s.prepare(ctx); err != nil {
		s.close()
		return nil, err
	}
	return s, nil
}

// prepare opens the admin pool on s.url and makes sure the migrated
// template exists.
func (s *server) prepare(ctx context.Context) error {
	cfg, err := pgxpool.ParseConfig(s.url)
	if err != nil {
		return fmt.Errorf("dbtest: parse database url: %w", err)
	}
	cfg.MaxConns = 4
	if cfg.ConnConfig.ConnectTimeout == 0 {
		cfg.ConnConfig.ConnectTimeout = 5 * time.Second
	}
	if s.admin, err = pgxpool.NewWithConfig(ctx, cfg); err != nil {
		return fmt.Errorf("dbtest: connect: %w", err)
	}
	name, err := templateName(migrations.FS)
	if err != nil {
		return err
	}
	if err := ensureTemplate(ctx, s.admin, s.url, name); err != nil {
		return err
	}
	s.template = name
	// The service's login role (roles belong to the server, so once); it
	// needs AppRole, which the template's migrations made.
	if err := store.EnsureLoginRole(ctx, s.url); err != nil {
		return fmt.Errorf("dbtest: %w", err)
	}
	return nil
}

func shutdown() error {
	mu.Lock()
	defer mu.Unlock()
	if shared == nil {
		return nil
	}
	err := shared.close()
	shared = nil
	return err
}

func (s *server) close() error {
	if s.admin != nil {
		s.admin.Close()
	}
	if s.cluster == nil {
		return nil
	}
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	err := s.cluster.Stop(ctx)
	if rmErr := os.RemoveAll(s.clusterDir); err == nil {
		err = rmErr
	}
	return err
}

// templateName is ck_tmpl_ and a hash of the migration files' names and
// contents, so a schema change makes (and uses) a new template.
func templateName(fsys fs.FS) (string, error) {
	names, err := fs.Glob(fsys, "*.sql")
	if err != nil {
		return "", fmt.Errorf("dbtest: list migrations: %w", err)
	}
	sort.Strings(names)
	h := sha256.New()
	for _, n := range names {
		b, err := fs.ReadFile(fsys, n)
		if err != nil {
			return "", fmt.Errorf("dbtest: read migration %s: %w", n, err)
		}
		fmt.Fprintf(h, "%s\x00%d\x00", n, len(b))
		h.Write(b)
	}
	return "ck_tmpl_" + hex.EncodeToString(h.Sum(nil))[:16], nil
}

// ensureTemplate makes the migrated template database name unless it
// exists. Under an advisory lock, so that of several test binaries one
// builds it and the others wait and then use it. It is built under a
// scratch name and renamed when complete, so a test run killed halfway
// never leaves a half-migrated template; connections to it are then
// forbidden, so copying it is never blocked by a stray session.
func ensureTemplate(ctx context.Context, admin *pgxpool.Pool, adminURL, name string) error {
	conn, err := admin.Acquire(ctx)
	if err != nil {
		return fmt.Errorf("dbtest: connect: %w", err)
	}
	defer conn.Release()
	if _, err := conn.Exec(ctx, `SELECT pg_advisory_lock($1)`, templateLockKey); err != nil {
		return fmt.Errorf("dbtest: take template lock: %w", err)
	}
	defer func() { _, _ = conn.Exec(context.WithoutCancel(ctx), `SELECT pg_advisory_unlock($1)`, templateLockKey) }()

	var exists bool
	if err := conn.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_database WHERE datname = $1)`, name).Scan(&exists); err != nil {
		return fmt.Errorf("dbtest: look up template: %w", err)
	}
	if exists {
		return nil
	}
	build := pgx.Identifier{name + "_build"}.Sanitize()
	if _, err := conn.Exec(ctx, `DROP DATABASE IF EXISTS `+build+` WITH (FORCE)`); err != nil {
		return fmt.Errorf("dbtest: drop half-built template: %w", err)
	}
	if _, err := conn.Exec(ctx, `CREATE DATABASE `+build); err != nil {
		return fmt.Errorf("dbtest: create template: %w", err)
	}
	buildURL, err := withDatabase(adminURL, name+"_build")
	if err != nil {
		return err
	}
	if err := store.MigrateUp(ctx, buildURL, time.Minute); err != nil {
		return fmt.Errorf("dbtest: migrate template: %w", err)
	}
	if _, err := conn.Exec(ctx, `ALTER DATABASE `+build+` WITH ALLOW_CONNECTIONS false`); err != nil {
		return fmt.Errorf("dbtest: seal template: %w", err)
	}
	// The migration's sessions are closed, but their backends may take a
	// moment to go; RENAME refuses while any remains.
	err = retryInUse(ctx, func() error {
		_, err := conn.Exec(ctx, `ALTER DATABASE `+build+` RENAME TO `+pgx.Identifier{name}.Sanitize())
		return err
	})
	if err != nil {
		return fmt.Errorf("dbtest: rename built template: %w", err)
	}
	return nil
}

// retryInUse runs fn again while it fails with object_in_use (55006,
// "database is being accessed by other users"), for up to 10 s.
func retryInUse(ctx context.Context, fn func() error) error {
	deadline := time.Now().Add(10 * time.Second)
	for {
		err := fn()
		var pgErr *pgconn.PgError
		if err == nil || !errors.As(err, &pgErr) || pgErr.Code != "55006" || time.Now().After(deadline) {
			return err
		}
		select {
		case <-ctx.Done():
			return fmt.Errorf("%w (last: %v)", ctx.Err(), err)
		case <-time.After(50 * time.Millisecond):
		}
	}
}

// withDatabase returns connString (a URL or keyword/value string) naming
// database db instead.
func withDatabase(connString, db string) (string, error) {
	if strings.HasPrefix(connString, "postgres://") || strings.HasPrefix(connString, "postgresql://") {
		u, err := url.Parse(connString)
		if err != nil {
			return "", fmt.Errorf("dbtest: parse database url: %w", err)
		}
		u.Path, u.RawPath = "/"+db, ""
		q := u.Query()
		if q.Has("dbname") {
			q.Set("dbname", db)
			u.RawQuery = q.Encode()
		}
		return u.String(), nil
	}
	// keyword/value: a later keyword overrides an earlier one.
	return connString + " dbname='" + strings.NewReplacer(`\`, `\\`, `'`, `\'`).Replace(db) + "'", nil
}

// NewURL returns the URL of a fresh database copied from the migrated
// template, dropped (WITH (FORCE)) when the test ends.
func NewURL(t testing.TB) string {
	t.Helper()
	s, err := get()
	if err != nil {
		t.Fatal(err)
	}
	return s.newDatabase(t, s.template)
}

// NewEmptyURL returns the URL of a fresh database with no curvekeeper
// schema (a copy of template0), dropped when the test ends: for tests of
// the migrations themselves.
func NewEmptyURL(t testing.TB) string {
	t.Helper()
	s, err := get()
	if err != nil {
		t.Fatal(err)
	}
	return s.newDatabase(t, "template0")
}

func (s *server) newDatabase(t testing.TB, template string) string {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	name := "ck_test_" + randomHex(8)
	if err := createCopy(ctx, s.admin, name, template); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
		defer cancel()
		if _, err := s.admin.Exec(ctx, `DROP DATABASE IF EXISTS `+pgx.Identifier{name}.Sanitize()+` WITH (FORCE)`); err != nil {
			t.Errorf("dbtest: drop test database %s: %v", name, err)
		}
	})
	u, err := withDatabase(s.url, name)
	if err != nil {
		t.Fatal(err)
	}
	return u
}

// createCopy creates database name from template, retrying briefly while
// another session still uses the template.
func createCopy(ctx context.Context, admin *pgxpool.Pool, name, template string) error {
	err := retryInUse(ctx, func() error {
		_, err := admin.Exec(ctx, `CREATE DATABASE `+pgx.Identifier{name}.Sanitize()+` TEMPLATE `+pgx.Identifier{template}.Sanitize())
		return err
	})
	if err != nil {
		return fmt.Errorf("dbtest: create test database from %s: %w", template, err)
	}
	return nil
}

// NewDB returns a store on a fresh migrated database (see NewURL), closed
// and dropped when the test ends.
func NewDB(t testing.TB) *store.DB {
	t.Helper()
	u := NewURL(t)
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	db, err := store.Open(ctx, u)
	if err != nil {
		t.Fatalf("dbtest: open test database: %v", err)
	}
	t.Cleanup(db.Close) // runs before the drop registered by NewURL
	return db
}

// NewAppDB returns a store on a fresh migrated database connected as the
// service connects in production: as store.LoginRole (neither superuser nor
// owner of any table) through store.OpenApp. The server must admit that
// role without a password (trust), as the private cluster does.
func NewAppDB(t testing.TB) *store.DB {
	t.Helper()
	u, err := store.WithUser(NewURL(t), store.LoginRole)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	db, err := store.OpenApp(ctx, u)
	if err != nil {
		t.Fatalf("dbtest: open test database as %s: %v", store.LoginRole, err)
	}
	t.Cleanup(db.Close)
	return db
}

func randomHex(n int) string {
	b := make([]byte, n)
	_, _ = rand.Read(b) // never fails (crypto/rand since Go 1.24)
	return hex.EncodeToString(b)
}
