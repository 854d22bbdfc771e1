// Package store is curvekeeper's PostgreSQL layer: it owns every SQL string
// and every pgx type. It imports calib, never the reverse.
package store

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgxpool"
)

// DB is a handle on the service's database.
type DB struct {
	Pool *pgxpool.Pool

	lookupsOnce  sync.Once
	tokenLookups *tokenLookups // see token_lookups.go

	writesOnce sync.Once
	runWrites  *runWrites // see run_writes.go

	methodDecodes methodDecodes // see methods.go

	appRole bool          // connections SET ROLE curvekeeper_app (OpenApp)
	recov   recoveryState // see replicas.go: read-only mode and read replicas
}

// AppRole is the role the service works as (migrations/000005_app_role):
// it may read and write the service's tables but holds no UPDATE, DELETE or
// TRUNCATE on audit.
const AppRole = "curvekeeper_app"

// DefaultMaxConns is the pool size Open uses when url sets no
// pool_max_conns. pgxpool's own default (the number of CPUs, at least 4) is
// too small for a service whose requests each hold a connection for a round
// trip or a commit: on 2 cores, 16 concurrent ingest clients queued for 4
// connections. Several replicas share the server's max_connections (100 by
// default), so a deployment of more than five replicas sets pool_max_conns
// lower (or puts a pooler in front).
const DefaultMaxConns = 16

// Open connects to the database named by url (a PostgreSQL URL or keyword/value
// string) and checks that it answers within the context's deadline. The pool
// holds up to DefaultMaxConns connections unless url says pool_max_conns;
// statements are prepared once per connection and cached (pgx's default
// QueryExecModeCacheStatement). Its connections keep the login user's
// privileges (the tables' owner, usually); the service uses OpenApp.
func Open(ctx context.Context, url string) (*DB, error) {
	return open(ctx, url, false)
}

// OpenApp is Open for the service: each new connection of the pool runs SET
// ROLE curvekeeper_app when that role exists and the login user may assume
// it, so that the service's own statements cannot change or remove audit
// rows even if a trigger were dropped. Where the role is missing (the
// migrating user could not create it) the connection keeps the login user's
// privileges.
func OpenApp(ctx context.Context, url string) (*DB, error) {
	return open(ctx, url, true)
}

// sqlCanAssumeAppRole is true when AppRole exists and session_user may SET
// ROLE to it (superusers may assume any role).
const sqlCanAssumeAppRole = `
SELECT coalesce(pg_has_role(session_user, r.oid, 'MEMBER'), false)
FROM (SELECT (SELECT oid FROM pg_roles WHERE rolname = $1) AS oid) AS r`

// assumeAppRole is the pool's AfterConnect hook of OpenApp.
func assumeAppRole(ctx context.Context, conn *pgx.Conn) error {
	var ok bool
	if err := conn.QueryRow(ctx, sqlCanAssumeAppRole, AppRole).Scan(&ok); err != nil {
		return fmt.Errorf("store: look up role %s: %w", AppRole, err)
	}
	if !ok {
		return nil
	}
	if _, err := conn.Exec(ctx, `SET ROLE `+pgx.Identifier{AppRole}.Sanitize()); err != nil {
		return fmt.Errorf("store: set role %s: %w", AppRole, err)
	}
	return nil
}

func open(ctx context.Context, url string, appRole bool) (*DB, error) {
	pool, err := newPool(ctx, url, appRole)
	if err != nil {
		return nil, err
	}
	if err := pool.Ping(ctx); err != nil {
		pool.Close()
		return nil, fmt.Errorf("store: connect: %w", err)
	}
	return &DB{Pool: pool, appRole: appRole}, nil
}

// newPool makes the pool of url without connecting yet.
func newPool(ctx context.Context, url string, appRole bool) (*pgxpool.Pool, error) {
	cfg, err := pgxpool.ParseConfig(url)
	if err != nil {
		return nil, fmt.Errorf("store: parse database url: %w", err)
	}
	if !strings.Contains(url, "pool_max_conns") {
		cfg.MaxConns = DefaultMaxConns
	}
	if cfg.ConnConfig.ConnectTimeout == 0 {
		cfg.ConnConfig.ConnectTimeout = 5 * time.Second
	}
	if appRole {
		cfg.AfterConnect = assumeAppRole
	}
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("store: open pool: %w", err)
	}
	return pool, nil
}

// Close closes every connection of the pool and of the read replicas'
// pools.
func (db *DB) Close() {
	db.closeReplicas()
	db.Pool.Close()
}

// Ping reports whether the database answers.
func (db *DB) Ping(ctx context.Context) error { return db.Pool.Ping(ctx) }

// maxTxAttempts bounds the retries of a transaction that failed with a
// serialization failure or a deadlock.
const maxTxAttempts = 5

// inTx runs fn in a transaction, commits it when fn returns nil and rolls it
// back otherwise (the rollback runs in a defer, so a panic cannot leave it
// open). A serialization failure (40001) or deadlock (40P01) is retried up to
// maxTxAttempts times, so fn must be safe to run again.
func (db *DB) inTx(ctx context.Context, fn func(pgx.Tx) error) error {
	if outer := txOf(ctx); outer != nil {
		// Inside Atomically: a savepoint of the unit's transaction; the
		// unit commits, and retries as a whole.
		return savepoint(ctx, outer, fn)
	}
	var err error
	for attempt := 1; attempt <= maxTxAttempts; attempt++ {
		err = db.tryTx(ctx, fn)
		if err == nil || !retryable(err) {
			return err
		}
	}
	return err
}

func (db *DB) tryTx(ctx context.Context, fn func(pgx.Tx) error) error {
	tx, err := db.Pool.Begin(ctx)
	if err != nil {
		return fmt.Errorf("store: begin: %w", err)
	}
	return runIn(ctx, tx, fn)
}

// savepoint runs fn in a savepoint of outer: its failure undoes its own
// statements only, and the error goes up to the unit.
func savepoint(ctx context.Context, outer pgx.Tx, fn func(pgx.Tx) error) error {
	sub, err := outer.Begin(ctx)
	if err != nil {
		return fmt.Errorf("store: savepoint: %w", err)
	}
	return runIn(ctx, sub, fn)
}

// runIn runs fn in tx (a transaction or a savepoint), commits it when fn
// returns nil and rolls it back otherwise, also on a panic.
func runIn(ctx context.Context, tx pgx.Tx, fn func(pgx.Tx) error) (err error) {
	defer func() {
		if err != nil {
			_ = tx.Rollback(context.WithoutCancel(ctx))
		}
	}()
	if err = fn(tx); err != nil {
		return err
	}
	if err = tx.Commit(ctx); err != nil {
		return fmt.Errorf("store: commit: %w", err)
	}
	return nil
}

func retryable(err error) bool {
	var pgErr *pgconn.PgError
	if errors.As(err, &pgErr) {
		return pgErr.Code == "40001" || pgErr.Code == "40P01"
	}
	return false
}

// DescribeURL names where a database connection string points (user, host,
// port and database) and nothing else: a password may sit in the URL's user
// part, in a ?password= parameter or in a key=value string, and none of them
// may reach a terminal or a log. A string pgconn cannot parse is not echoed.
func DescribeURL(u string) string {
	cfg, err := pgconn.ParseConfig(u)
	if err != nil {
		return "(a connection string that does not parse)"
	}
	host := cfg.Host
	if strings.HasPrefix(host, "/") {
		host = "[" + host + "]" // a Unix socket folder
	}
	return fmt.Sprintf("postgres://%s@%s:%d/%s", cfg.User, host, cfg.Port, cfg.Database)
}
