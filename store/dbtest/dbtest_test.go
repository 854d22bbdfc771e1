package dbtest

import (
	"context"
	"fmt"
	"strings"
	"sync"
	"testing"
	"testing/fstest"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"curvekeeper/store"
)

func TestMain(m *testing.M) { Main(m) }

func adminServer(t *testing.T) *server {
	t.Helper()
	s, err := get()
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func databaseExists(t *testing.T, name string) bool {
	t.Helper()
	var ok bool
	err := adminServer(t).admin.QueryRow(context.Background(),
		`SELECT EXISTS (SELECT 1 FROM pg_database WHERE datname = $1)`, name).Scan(&ok)
	if err != nil {
		t.Fatal(err)
	}
	return ok
}

func TestNewDBIsMigratedAndSeparate(t *testing.T) {
	ctx := context.Background()
	a, b := NewDB(t), NewDB(t)
	for _, db := range []*store.DB{a, b} {
		if err := db.CheckSchema(ctx); err != nil {
			t.Errorf("CheckSchema on a new database = %v, want nil", err)
		}
	}
	if _, err := a.Pool.Exec(ctx, `CREATE TABLE only_in_a (v int)`); err != nil {
		t.Fatal(err)
	}
	var found bool
	if err := b.Pool.QueryRow(ctx, `SELECT to_regclass('only_in_a') IS NOT NULL`).Scan(&found); err != nil {
		t.Fatal(err)
	}
	if found {
		t.Error("a table made in one test database is visible in another")
	}
}

func TestNewEmptyURLHasNoSchema(t *testing.T) {
	v, dirty, err := store.SchemaVersion(context.Background(), NewEmptyURL(t))
	if err != nil || v != 0 || dirty {
		t.Errorf("SchemaVersion of an empty database = %d, %v, %v; want 0, false, nil", v, dirty, err)
	}
}

func TestDatabaseDroppedAfterTest(t *testing.T) {
	var name string
	t.Run("user", func(t *testing.T) {
		db := NewDB(t)
		if err := db.Pool.QueryRow(context.Background(), `SELECT current_database()`).Scan(&name); err != nil {
			t.Fatal(err)
		}
		if !databaseExists(t, name) {
			t.Fatalf("database %s missing during the test", name)
		}
	})
	if name == "" {
		t.Fatal("subtest did not record its database")
	}
	if databaseExists(t, name) {
		t.Errorf("database %s still exists after its test ended", name)
	}
}

func TestParallelTests(t *testing.T) {
	for i := range 6 {
		t.Run(fmt.Sprint(i), func(t *testing.T) {
			t.Parallel()
			ctx := context.Background()
			db := NewDB(t)
			if _, err := db.Pool.Exec(ctx, `CREATE TABLE mine (v int)`); err != nil {
				t.Fatal(err)
			}
			if _, err := db.Pool.Exec(ctx, `INSERT INTO mine VALUES ($1)`, i); err != nil {
				t.Fatal(err)
			}
			var n, v int
			if err := db.Pool.QueryRow(ctx, `SELECT count(*), max(v) FROM mine`).Scan(&n, &v); err != nil {
				t.Fatal(err)
			}
			if n != 1 || v != i {
				t.Errorf("rows = %d, value %d; want 1, %d", n, v, i)
			}
		})
	}
}

// TestEnsureTemplateConcurrent builds one template from several pools at
// once, as several test binaries sharing DATABASE_URL do.
func TestEnsureTemplateConcurrent(t *testing.T) {
	s := adminServer(t)
	name := "ck_tmpl_concurrency_" + randomHex(4)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	t.Cleanup(func() {
		_, _ = s.admin.Exec(context.Background(), `DROP DATABASE IF EXISTS `+pgx.Identifier{name}.Sanitize()+` WITH (FORCE)`)
	})
	const binaries = 3
	errs := make([]error, binaries)
	var wg sync.WaitGroup
	for i := range binaries {
		wg.Add(1)
		go func() {
			defer wg.Done()
			pool, err := pgxpool.New(ctx, s.url)
			if err != nil {
				errs[i] = err
				return
			}
			defer pool.Close()
			errs[i] = ensureTemplate(ctx, pool, s.url, name)
		}()
	}
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			t.Errorf("binary %d: ensureTemplate = %v", i, err)
		}
	}
	var allow bool
	if err := s.admin.QueryRow(ctx, `SELECT datallowconn FROM pg_database WHERE datname = $1`, name).Scan(&allow); err != nil {
		t.Fatalf("template %s: %v", name, err)
	}
	if allow {
		t.Error("template accepts connections, want them refused")
	}
	if databaseExists(t, name+"_build") {
		t.Error("scratch build database left behind")
	}
	copyName := "ck_test_" + randomHex(8)
	if err := createCopy(ctx, s.admin, copyName, name); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		_, _ = s.admin.Exec(context.Background(), `DROP DATABASE IF EXISTS `+pgx.Identifier{copyName}.Sanitize()+` WITH (FORCE)`)
	})
	u, err := withDatabase(s.url, copyName)
	if err != nil {
		t.Fatal(err)
	}
	v, dirty, err := store.SchemaVersion(ctx, u)
	if err != nil || v != store.LatestVersion() || dirty {
		t.Errorf("copy of the template: SchemaVersion = %d, %v, %v; want %d, false, nil", v, dirty, err, store.LatestVersion())
	}
}

// TestCreateCopyWaitsForTemplateUsers: CREATE DATABASE ... TEMPLATE fails
// while someone is connected to the template; createCopy retries.
func TestCreateCopyWaitsForTemplateUsers(t *testing.T) {
	s := adminServer(t)
	ctx := context.Background()
	src := "ck_test_src_" + randomHex(4)
	dst := "ck_test_dst_" + randomHex(4)
	t.Cleanup(func() {
		for _, n := range []string{dst, src} {
			_, _ = s.admin.Exec(ctx, `DROP DATABASE IF EXISTS `+pgx.Identifier{n}.Sanitize()+` WITH (FORCE)`)
		}
	})
	if _, err := s.admin.Exec(ctx, `CREATE DATABASE `+pgx.Identifier{src}.Sanitize()); err != nil {
		t.Fatal(err)
	}
	srcURL, err := withDatabase(s.url, src)
	if err != nil {
		t.Fatal(err)
	}
	user, err := pgx.Connect(ctx, srcURL)
	if err != nil {
		t.Fatal(err)
	}
	time.AfterFunc(300*time.Millisecond, func() { user.Close(ctx) })
	if err := createCopy(ctx, s.admin, dst, src); err != nil {
		t.Fatalf("createCopy while the template was in use for 300ms = %v, want success after a retry", err)
	}
	if !databaseExists(t, dst) {
		t.Errorf("database %s not created", dst)
	}
}

func TestTemplateNameFollowsMigrations(t *testing.T) {
	v1 := fstest.MapFS{"000001_a.up.sql": {Data: []byte("CREATE TABLE a (x int);")}, "000001_a.down.sql": {Data: []byte("DROP TABLE a;")}}
	v1again := fstest.MapFS{"000001_a.down.sql": {Data: []byte("DROP TABLE a;")}, "000001_a.up.sql": {Data: []byte("CREATE TABLE a (x int);")}}
	v2 := fstest.MapFS{"000001_a.up.sql": {Data: []byte("CREATE TABLE a (x bigint);")}, "000001_a.down.sql": {Data: []byte("DROP TABLE a;")}}
	n1, err1 := templateName(v1)
	n1again, err2 := templateName(v1again)
	n2, err3 := templateName(v2)
	if err1 != nil || err2 != nil || err3 != nil {
		t.Fatal(err1, err2, err3)
	}
	if n1 != n1again {
		t.Errorf("same migrations gave %q and %q", n1, n1again)
	}
	if n1 == n2 {
		t.Errorf("changed migration kept template name %q", n1)
	}
	if !strings.HasPrefix(n1, "ck_tmpl_") || len(n1) > 63 {
		t.Errorf("template name %q: want prefix ck_tmpl_ and at most 63 bytes", n1)
	}
}

func TestWithDatabase(t *testing.T) {
	tests := []struct {
		name, in, want string
	}{
		{"tcp url", "postgres://u@127.0.0.1:5432/postgres?sslmode=disable", "postgres://u@127.0.0.1:5432/other?sslmode=disable"},
		{"postgresql scheme", "postgresql://u@h/db", "postgresql://u@h/other"},
		{"socket url", "postgres://postgres@/curvekeeper?host=%2Ftmp%2Fx&port=5432", "postgres://postgres@/other?host=%2Ftmp%2Fx&port=5432"},
		{"keyword/value", "host=/tmp/x user=postgres dbname=curvekeeper", "host=/tmp/x user=postgres dbname=curvekeeper dbname='other'"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := withDatabase(tt.in, "other")
			if err != nil {
				t.Fatal(err)
			}
			if got != tt.want {
				t.Errorf("withDatabase(%q) = %q, want %q", tt.in, got, tt.want)
			}
			cfg, err := pgx.ParseConfig(got)
			if err != nil {
				t.Fatalf("pgx cannot parse %q: %v", got, err)
			}
			if cfg.Database != "other" {
				t.Errorf("pgx reads database %q from %q, want other", cfg.Database, got)
			}
		})
	}
}
