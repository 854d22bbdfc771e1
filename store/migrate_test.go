package store_test

// store's TestMain lives in testdb_test.go; these tests take their
// databases from dbtest (a fresh one each, empty or migrated).

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"regexp"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/migrations"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

func execSQL(t *testing.T, url, sql string, args ...any) {
	t.Helper()
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatalf("connect: %v", err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, sql, args...); err != nil {
		t.Fatalf("%s: %v", sql, err)
	}
}

func wantVersion(t *testing.T, url string, want uint) {
	t.Helper()
	v, dirty, err := store.SchemaVersion(context.Background(), url)
	if err != nil {
		t.Fatalf("SchemaVersion: %v", err)
	}
	if v != want || dirty {
		t.Fatalf("SchemaVersion = %d (dirty %v), want %d (clean)", v, dirty, want)
	}
}

// tamperSQL fills %[1]d with the latest version when the statement has it.
func tamperSQL(sql string, latest uint) string {
	if strings.Contains(sql, "%[1]d") {
		return fmt.Sprintf(sql, latest)
	}
	return sql
}

func TestLatestVersionMatchesFiles(t *testing.T) {
	ents, err := os.ReadDir("../migrations")
	if err != nil {
		t.Fatal(err)
	}
	re := regexp.MustCompile(`^(\d+)_.*\.up\.sql$`)
	want := uint(0)
	for _, e := range ents {
		if m := re.FindStringSubmatch(e.Name()); m != nil {
			n, _ := strconv.ParseUint(m[1], 10, 64)
			want = max(want, uint(n))
		}
	}
	if want == 0 {
		t.Fatal("no migrations found in ../migrations")
	}
	if got := store.LatestVersion(); got != want {
		t.Errorf("LatestVersion() = %d, want %d", got, want)
	}
}

// TestMigrateUpConcurrent starts migrations from several goroutines, as
// several replicas starting together would: all must succeed (a second
// application of a migration would fail on objects that already exist)
// and the schema must end at the latest version, clean.
func TestMigrateUpConcurrent(t *testing.T) {
	t.Parallel()
	url := dbtest.NewEmptyURL(t)
	const replicas = 4
	errs := make([]error, replicas)
	var wg sync.WaitGroup
	for i := range replicas {
		wg.Add(1)
		go func() {
			defer wg.Done()
			ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
			defer cancel()
			errs[i] = store.MigrateUp(ctx, url, 30*time.Second)
		}()
	}
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			t.Errorf("replica %d: MigrateUp = %v, want nil", i, err)
		}
	}
	wantVersion(t, url, store.LatestVersion())
}

// TestMigrateUpLockTimeout holds the migration lock in another session:
// MigrateUp must give up with ErrMigrationLocked after its timeout, not
// hang, and succeed once the lock is free.
func TestMigrateUpLockTimeout(t *testing.T) {
	t.Parallel()
	url := dbtest.NewEmptyURL(t)
	ctx := context.Background()
	holder, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer holder.Close(ctx)
	if _, err := holder.Exec(ctx, `SELECT pg_advisory_lock($1)`, store.MigrationLockKey); err != nil {
		t.Fatal(err)
	}

	start := time.Now()
	err = store.MigrateUp(ctx, url, 500*time.Millisecond)
	elapsed := time.Since(start)
	t.Logf("MigrateUp gave up after %s", elapsed)
	if !errors.Is(err, store.ErrMigrationLocked) {
		t.Fatalf("MigrateUp while locked = %v, want ErrMigrationLocked", err)
	}
	if elapsed > 10*time.Second {
		t.Errorf("MigrateUp gave up after %s, want about the 500ms lock timeout", elapsed)
	}
	wantVersion(t, url, 0)

	if _, err := holder.Exec(ctx, `SELECT pg_advisory_unlock($1)`, store.MigrationLockKey); err != nil {
		t.Fatal(err)
	}
	if err := store.MigrateUp(ctx, url, 5*time.Second); err != nil {
		t.Fatalf("MigrateUp after unlock = %v", err)
	}
	wantVersion(t, url, store.LatestVersion())
}

func TestMigrateDownAndUpAgain(t *testing.T) {
	t.Parallel()
	url := dbtest.NewEmptyURL(t)
	ctx := context.Background()
	if err := store.MigrateUp(ctx, url, 0); err != nil {
		t.Fatal(err)
	}
	latest := store.LatestVersion()
	// Versions are assigned per change and may leave gaps, so the steps down
	// to zero are the migrations embedded, not the latest version number.
	ups, err := fs.Glob(migrations.FS, "*.up.sql")
	if err != nil {
		t.Fatal(err)
	}
	if err := store.MigrateDown(ctx, url, len(ups)); err != nil {
		t.Fatalf("MigrateDown(%d) = %v", len(ups), err)
	}
	wantVersion(t, url, 0)
	if err := store.MigrateDown(ctx, url, 0); err == nil {
		t.Error("MigrateDown(0) = nil, want an error")
	}
	if err := store.MigrateUp(ctx, url, 0); err != nil {
		t.Fatalf("MigrateUp after down = %v", err)
	}
	wantVersion(t, url, latest)
	if err := store.MigrateUp(ctx, url, 0); err != nil {
		t.Fatalf("MigrateUp with nothing to do = %v", err)
	}
}

// TestConnectionStringForms: what localpg's URL() returns (a URL with a
// host=/socket/dir query), plain postgres:// and postgresql:// URLs and
// keyword/value strings must all work.
func TestConnectionStringForms(t *testing.T) {
	t.Parallel()
	url := dbtest.NewEmptyURL(t)
	cfg, err := pgx.ParseConfig(url)
	if err != nil {
		t.Fatal(err)
	}
	kv := fmt.Sprintf("host='%s' port=%d user='%s' dbname='%s' sslmode=disable", cfg.Host, cfg.Port, cfg.User, cfg.Database)
	forms := []struct {
		name string
		url  string
	}{
		{"as given", url},
		{"postgresql scheme", "postgresql://" + strings.TrimPrefix(url, "postgres://")},
		{"keyword/value", kv},
	}
	if err := store.MigrateUp(context.Background(), kv, 0); err != nil {
		t.Fatalf("MigrateUp(%q) = %v", kv, err)
	}
	for _, f := range forms {
		t.Run(f.name, func(t *testing.T) {
			if err := store.MigrateUp(context.Background(), f.url, 0); err != nil {
				t.Errorf("MigrateUp(%q) = %v", f.url, err)
			}
			wantVersion(t, f.url, store.LatestVersion())
		})
	}
}

func TestCheckSchema(t *testing.T) {
	t.Parallel()
	latest := store.LatestVersion()
	tests := []struct {
		name      string
		tamper    string // SQL run on a migrated database; %[1]d is latest
		wantErr   bool
		wantDirty bool
		wantText  string
	}{
		{"current", ``, false, false, ""},
		{"dirty", `UPDATE schema_migrations SET dirty = true`, true, true, "`curvekeeper migrate force"},
		{"newer", `UPDATE schema_migrations SET version = %[1]d + 1`, true, false, fmt.Sprintf("upgrade curvekeeper (this binary knows schema %d)", latest)},
		{"older", `UPDATE schema_migrations SET version = %[1]d - 1`, true, false, "run `curvekeeper migrate up`"},
		{"no schema table", `DROP TABLE schema_migrations`, true, false, "run `curvekeeper migrate up`"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			t.Parallel()
			url := dbtest.NewURL(t)
			if tt.tamper != "" {
				execSQL(t, url, tamperSQL(tt.tamper, latest))
			}
			ctx := context.Background()
			db, err := store.Open(ctx, url)
			if err != nil {
				t.Fatal(err)
			}
			defer db.Close()
			err = db.CheckSchema(ctx)
			if !tt.wantErr {
				if err != nil {
					t.Fatalf("CheckSchema = %v, want nil", err)
				}
				return
			}
			var se *store.SchemaError
			if !errors.As(err, &se) {
				t.Fatalf("CheckSchema = %v, want a *store.SchemaError", err)
			}
			if se.Dirty != tt.wantDirty || se.Latest != latest {
				t.Errorf("SchemaError = %+v, want Dirty %v, Latest %d", *se, tt.wantDirty, latest)
			}
			if !strings.Contains(err.Error(), tt.wantText) {
				t.Errorf("CheckSchema error %q does not say %q", err, tt.wantText)
			}
		})
	}
}

// TestMigrateUpRefusesDirtyOrNewer: MigrateUp must not touch such a schema
// and must say what to do.
func TestMigrateUpRefusesDirtyOrNewer(t *testing.T) {
	t.Parallel()
	latest := int64(store.LatestVersion())
	tests := []struct {
		name, tamper string
		wantVersion  uint
		wantDirty    bool
	}{
		{"dirty", `UPDATE schema_migrations SET dirty = true`, uint(latest), true},
		{"newer", `UPDATE schema_migrations SET version = %[1]d + 1`, uint(latest) + 1, false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			t.Parallel()
			url := dbtest.NewURL(t)
			execSQL(t, url, tamperSQL(tt.tamper, uint(latest)))
			err := store.MigrateUp(context.Background(), url, 0)
			var se *store.SchemaError
			if !errors.As(err, &se) {
				t.Fatalf("MigrateUp = %v, want a *store.SchemaError", err)
			}
			v, dirty, err := store.SchemaVersion(context.Background(), url)
			if err != nil || v != tt.wantVersion || dirty != tt.wantDirty {
				t.Errorf("after refusal SchemaVersion = %d, %v, %v; want %d, %v, nil (untouched)", v, dirty, err, tt.wantVersion, tt.wantDirty)
			}
		})
	}
}

func TestMigrateForceClearsDirty(t *testing.T) {
	t.Parallel()
	url := dbtest.NewURL(t)
	latest := store.LatestVersion()
	execSQL(t, url, `UPDATE schema_migrations SET dirty = true`)
	if err := store.MigrateForce(context.Background(), url, int(latest)); err != nil {
		t.Fatalf("MigrateForce = %v", err)
	}
	wantVersion(t, url, latest)
}
