package store

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"time"

	"github.com/golang-migrate/migrate/v4"
	pgxmigrate "github.com/golang-migrate/migrate/v4/database/pgx/v5"
	"github.com/golang-migrate/migrate/v4/source"
	"github.com/golang-migrate/migrate/v4/source/iofs"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/stdlib"

	"curvekeeper/migrations"
)

// DefaultLockTimeout is how long MigrateUp waits for another process's
// migration to finish when it is given no timeout.
const DefaultLockTimeout = 30 * time.Second

// MigrationLockKey names the session advisory lock (pg_advisory_lock) that
// MigrateUp, MigrateDown and MigrateForce hold while they run. It is taken
// before golang-migrate opens its own connection, with a bounded wait,
// because golang-migrate's own lock waits without end in the database and
// only its caller gives up on LockTimeout (its waiting goroutine and
// connection linger). Holding this one first means golang-migrate's lock is
// never contended between curvekeeper processes. An operator finds the
// holder with SELECT pid FROM pg_locks WHERE locktype = 'advisory' AND
// classid = 25451 AND objid = 1601005927 (the key split in two 32-bit halves).
const MigrationLockKey int64 = 0x636b5f6d6967 // "ck_mig"

// ErrMigrationLocked is matched (errors.Is) when the migration lock stayed
// held by another session for the whole lock timeout.
var ErrMigrationLocked = errors.New("the migration lock is held by another process")

// SchemaError says why the database schema does not fit this binary; its
// message says what to do.
type SchemaError struct {
	Version uint // the database's schema version; 0 when none is applied
	Dirty   bool // a migration to Version failed or was interrupted halfway
	Latest  uint // the newest version this binary embeds
}

func (e *SchemaError) Error() string {
	switch {
	case e.Dirty:
		return fmt.Sprintf("store: the database schema is dirty at version %d (a migration failed or was interrupted halfway); "+
			"run `curvekeeper migrate version`, repair the schema by hand against migrations/%06d_*.sql, "+
			"then `curvekeeper migrate force <version that now matches>` and `curvekeeper migrate up`", e.Version, e.Version)
	case e.Version > e.Latest:
		return fmt.Sprintf("store: the database schema is at version %d, newer than this curvekeeper knows; "+
			"upgrade curvekeeper (this binary knows schema %d)", e.Version, e.Latest)
	case e.Version == 0:
		return fmt.Sprintf("store: the database holds no curvekeeper schema yet; run `curvekeeper migrate up` (this binary knows schema %d)", e.Latest)
	default:
		return fmt.Sprintf("store: the database schema is at version %d but this curvekeeper needs %d; run `curvekeeper migrate up`", e.Version, e.Latest)
	}
}

// MigrateUp applies every embedded migration the database at url (a
// PostgreSQL URL or keyword/value string) lacks. When another process is
// migrating the same database it waits up to lockTimeout
// (DefaultLockTimeout when <= 0) for it and then applies what is left,
// usually nothing; past the wait it fails with ErrMigrationLocked, never
// hangs. It refuses a dirty schema and one newer than this binary knows
// (*SchemaError). Cancelling ctx stops it between two migrations.
func MigrateUp(ctx context.Context, url string, lockTimeout time.Duration) error {
	return withMigrate(ctx, url, lockTimeout, func(m *migrate.Migrate) error {
		if err := checkMigratable(m); err != nil {
			return err
		}
		if err := m.Up(); err != nil && !errors.Is(err, migrate.ErrNoChange) {
			return fmt.Errorf("store: migrate up: %w", err)
		}
		return nil
	})
}

// MigrateDown reverts the newest steps migrations (steps >= 1).
func MigrateDown(ctx context.Context, url string, steps int) error {
	if steps < 1 {
		return fmt.Errorf("store: migrate down: steps must be at least 1, got %d", steps)
	}
	return withMigrate(ctx, url, DefaultLockTimeout, func(m *migrate.Migrate) error {
		if err := checkMigratable(m); err != nil {
			return err
		}
		if err := m.Steps(-steps); err != nil {
			return fmt.Errorf("store: migrate down %d: %w", steps, err)
		}
		return nil
	})
}

// MigrateForce records version as the schema version and clears the dirty
// flag without running any migration: the last step of a repair by hand.
func MigrateForce(ctx context.Context, url string, version int) error {
	return withMigrate(ctx, url, DefaultLockTimeout, func(m *migrate.Migrate) error {
		if err := m.Force(version); err != nil {
			return fmt.Errorf("store: migrate force %d: %w", version, err)
		}
		return nil
	})
}

// checkMigratable refuses a dirty schema or one newer than the embedded
// migrations, before golang-migrate gives a less helpful error.
func checkMigratable(m *migrate.Migrate) error {
	v, dirty, err := m.Version()
	if errors.Is(err, migrate.ErrNilVersion) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("store: read schema version: %w", err)
	}
	if latest := LatestVersion(); dirty || v > latest {
		return &SchemaError{Version: v, Dirty: dirty, Latest: latest}
	}
	return nil
}

// withMigrate holds the migration lock on a session of its own and runs fn
// with a golang-migrate instance over the embedded migrations (iofs source,
// pgx/v5 driver). The driver is given a *sql.DB built from pgx's parsed
// configuration, so every form pgx accepts works: postgres:// and
// postgresql:// URLs, URLs with ?host=/socket/dir, keyword/value strings.
func withMigrate(ctx context.Context, url string, lockTimeout time.Duration, fn func(*migrate.Migrate) error) error {
	if lockTimeout <= 0 {
		lockTimeout = DefaultLockTimeout
	}
	cfg, err := pgx.ParseConfig(url)
	if err != nil {
		return fmt.Errorf("store: parse database url: %w", err)
	}
	if cfg.ConnectTimeout == 0 {
		cfg.ConnectTimeout = 5 * time.Second
	}
	lockConn, err := pgx.ConnectConfig(ctx, cfg)
	if err != nil {
		return fmt.Errorf("store: connect: %w", err)
	}
	defer lockConn.Close(context.WithoutCancel(ctx)) // also releases the lock
	if err := acquireMigrationLock(ctx, lockConn, lockTimeout); err != nil {
		return err
	}

	src, err := iofs.New(migrations.FS, ".")
	if err != nil {
		return fmt.Errorf("store: read embedded migrations: %w", err)
	}
	sqlDB := stdlib.OpenDB(*cfg)
	drv, err := pgxmigrate.WithInstance(sqlDB, &pgxmigrate.Config{})
	if err != nil {
		sqlDB.Close()
		src.Close()
		return fmt.Errorf("store: open migration driver: %w", err)
	}
	m, err := migrate.NewWithInstance("iofs", src, "pgx5", drv)
	if err != nil {
		drv.Close()
		src.Close()
		return fmt.Errorf("store: migrate: %w", err)
	}
	m.LockTimeout = lockTimeout
	stop := context.AfterFunc(ctx, func() { m.GracefulStop <- true })
	defer stop()

	err = fn(m)
	srcErr, dbErr := m.Close()
	if err == nil && ctx.Err() != nil {
		err = fmt.Errorf("store: migrate: %w", ctx.Err())
	}
	if err != nil {
		return err
	}
	if e := errors.Join(srcErr, dbErr); e != nil {
		return fmt.Errorf("store: close migrations: %w", e)
	}
	_, _ = lockConn.Exec(context.WithoutCancel(ctx), `SELECT pg_advisory_unlock($1)`, MigrationLockKey)
	return nil
}

// acquireMigrationLock polls pg_try_advisory_lock until it wins, the wait
// passes or ctx ends. Polling (not a blocking pg_advisory_lock) keeps the
// wait bounded on our side and leaves no waiter queued in the server.
func acquireMigrationLock(ctx context.Context, conn *pgx.Conn, wait time.Duration) error {
	deadline := time.Now().Add(wait)
	for {
		var got bool
		if err := conn.QueryRow(ctx, `SELECT pg_try_advisory_lock($1)`, MigrationLockKey).Scan(&got); err != nil {
			return fmt.Errorf("store: take migration lock: %w", err)
		}
		if got {
			return nil
		}
		if time.Now().After(deadline) {
			return fmt.Errorf("store: migrate: %w (waited %s); another curvekeeper is probably migrating this database: start again once it is done", ErrMigrationLocked, wait)
		}
		select {
		case <-ctx.Done():
			return fmt.Errorf("store: wait for migration lock: %w", ctx.Err())
		case <-time.After(100 * time.Millisecond):
		}
	}
}

// LatestVersion returns the highest version among the embedded migrations.
func LatestVersion() uint {
	latest := uint(0)
	ents, _ := fs.ReadDir(migrations.FS, ".")
	for _, e := range ents {
		if m, err := source.Parse(e.Name()); err == nil && m.Version > latest {
			latest = m.Version
		}
	}
	return latest
}

// SchemaVersion reports the schema version of the database at url and
// whether it is dirty; version 0 means no migration was ever applied. It
// only reads: unlike golang-migrate it creates no table.
func SchemaVersion(ctx context.Context, url string) (version uint, dirty bool, err error) {
	cfg, err := pgx.ParseConfig(url)
	if err != nil {
		return 0, false, fmt.Errorf("store: parse database url: %w", err)
	}
	if cfg.ConnectTimeout == 0 {
		cfg.ConnectTimeout = 5 * time.Second
	}
	conn, err := pgx.ConnectConfig(ctx, cfg)
	if err != nil {
		return 0, false, fmt.Errorf("store: connect: %w", err)
	}
	defer conn.Close(context.WithoutCancel(ctx))
	return readSchemaVersion(ctx, conn)
}

// versionReader is what readSchemaVersion needs of a *pgx.Conn or *pgxpool.Pool.
type versionReader interface {
	QueryRow(ctx context.Context, sql string, args ...any) pgx.Row
}

func readSchemaVersion(ctx context.Context, q versionReader) (uint, bool, error) {
	var v int64
	var dirty bool
	err := q.QueryRow(ctx, `SELECT version, dirty FROM schema_migrations LIMIT 1`).Scan(&v, &dirty)
	var pgErr *pgconn.PgError
	switch {
	case errors.Is(err, pgx.ErrNoRows):
		return 0, false, nil
	case errors.As(err, &pgErr) && pgErr.Code == "42P01": // undefined_table
		return 0, false, nil
	case err != nil:
		return 0, false, fmt.Errorf("store: read schema version: %w", err)
	case v < 0:
		return 0, dirty, nil // golang-migrate's "no version" after forcing -1
	}
	return uint(v), dirty, nil
}

// CheckSchema returns nil when the database schema is exactly the newest
// this binary embeds and clean, a *SchemaError saying what to do when it is
// dirty, older or newer, and a wrapped error when it cannot be read.
// Startup and /readyz call it.
func (db *DB) CheckSchema(ctx context.Context) error {
	v, dirty, err := readSchemaVersion(ctx, db.Pool)
	if err != nil {
		return err
	}
	if latest := LatestVersion(); dirty || v != latest {
		return &SchemaError{Version: v, Dirty: dirty, Latest: latest}
	}
	return nil
}
