package localpg

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"time"

	"github.com/jackc/pgx/v5"
)

// StandbyOptions configures StartStandby.
type StandbyOptions struct {
	Options
	// Name is the standby's cluster_name, which its WAL receiver reports
	// to the primary as application_name: the name synchronous_standby_names
	// lists. Empty leaves PostgreSQL's default ("walreceiver").
	Name string
	// Slot, when not empty, is a physical replication slot created on the
	// primary by pg_basebackup (-C -S) and used by the standby, so the
	// primary keeps the WAL the standby has not received yet.
	Slot string
}

// standbySource is what start needs of the primary to make a standby.
type standbySource struct {
	socketDir string
	major     string
	opt       StandbyOptions
}

// StartStandby starts a hot standby of primary in opt.DataDir: on first
// start it copies the primary with pg_basebackup -R (streaming the WAL of
// the copy, fast checkpoint), which writes standby.signal and the
// primary_conninfo that points at the primary's Unix socket; afterwards it
// restarts the standby already there. The standby has its own socket
// folder and log, streams the primary's WAL and serves read-only
// connections (hot_standby=on) once it is consistent, which is when
// StartStandby returns. The primary keeps the default wal_level=replica and
// max_wal_senders of PostgreSQL 10 and later; its pg_hba.conf (made by
// Start) trusts local replication connections.
func StartStandby(ctx context.Context, primary *Cluster, opt StandbyOptions) (*Cluster, error) {
	if primary == nil {
		return nil, errors.New("localpg: no primary given for the standby")
	}
	b, err := os.ReadFile(filepath.Join(primary.pgData, "PG_VERSION"))
	if err != nil {
		return nil, fmt.Errorf("localpg: read the primary's version: %w", err)
	}
	settings := append([]string{"hot_standby=on"}, opt.Settings...)
	if opt.Name != "" {
		settings = append(settings, "cluster_name="+opt.Name)
	}
	o := opt.Options
	o.Settings = settings
	return start(ctx, o, &standbySource{socketDir: primary.socketDir, major: strings.TrimSpace(string(b)), opt: opt})
}

// basebackup makes the standby's pgdata from the primary, in a scratch
// folder renamed into place when complete (as initdb does).
func (c *Cluster) basebackup(ctx context.Context, src *standbySource, noSync bool) error {
	scratch := c.pgData + ".basebackup"
	if err := os.RemoveAll(scratch); err != nil {
		return fmt.Errorf("localpg: remove half-made standby: %w", err)
	}
	if err := os.Mkdir(scratch, 0o700); err != nil {
		return fmt.Errorf("localpg: %w", err)
	}
	if err := c.acct.own(scratch); err != nil {
		return err
	}
	args := []string{"-D", scratch, "-h", src.socketDir, "-p", port, "-U", superuser,
		"-R", "-X", "stream", "-c", "fast", "--no-password"}
	if noSync {
		args = append(args, "--no-sync")
	}
	if src.opt.Slot != "" {
		args = append(args, "-C", "-S", src.opt.Slot)
	}
	started := time.Now()
	cmd := exec.CommandContext(ctx, c.bins.tool("pg_basebackup"), args...)
	cmd.Dir = c.dataDir
	cmd.Env = serverEnv()
	cmd.SysProcAttr = &syscall.SysProcAttr{Credential: c.acct.credential()}
	if out, err := cmd.CombinedOutput(); err != nil {
		os.RemoveAll(scratch)
		return fmt.Errorf("localpg: pg_basebackup failed: %w: %s", err, tail(string(out), 8))
	}
	// The copy carries the primary's postmaster.opts and log settings but
	// no postmaster.pid; standby.signal and primary_conninfo come from -R.
	if err := os.Rename(scratch, c.pgData); err != nil {
		return fmt.Errorf("localpg: %w", err)
	}
	c.log.Info("localpg: copied the primary for a standby", "data_dir", c.pgData, "took", time.Since(started).Round(time.Millisecond))
	return nil
}

// Promote ends the standby's recovery (pg_ctl promote) and waits until it
// accepts writes.
func (c *Cluster) Promote(ctx context.Context) error {
	cmd := exec.CommandContext(ctx, c.bins.tool("pg_ctl"), "promote", "-D", c.pgData, "-w", "-t", "60")
	cmd.Dir = c.pgData
	cmd.Env = serverEnv()
	cmd.SysProcAttr = &syscall.SysProcAttr{Credential: c.acct.credential()}
	if out, err := cmd.CombinedOutput(); err != nil {
		return fmt.Errorf("localpg: pg_ctl promote: %w: %s", err, tail(string(out), 8))
	}
	return nil
}

// CurrentLSN makes the primary flush its WAL and returns the flush
// position, as PostgreSQL prints it ("0/3000148"): what a standby must
// replay to see every transaction committed so far. The flush is a
// transaction that writes one WAL record (a logical decoding message, which
// changes no table) and commits with synchronous_commit=local, which
// flushes all WAL up to its commit record, also that of
// commits made with synchronous_commit=off (as the test clusters' are),
// without waiting for any synchronous standby.
func (c *Cluster) CurrentLSN(ctx context.Context) (string, error) {
	var lsn string
	err := c.withConn(ctx, func(conn *pgx.Conn) error {
		_, err := conn.Exec(ctx, `BEGIN; SET LOCAL synchronous_commit = local; SELECT pg_logical_emit_message(true, 'localpg', 'flush'); COMMIT`)
		if err != nil {
			return fmt.Errorf("localpg: flush WAL: %w", err)
		}
		return conn.QueryRow(ctx, `SELECT pg_current_wal_flush_lsn()::text`).Scan(&lsn)
	})
	return lsn, err
}

// WaitReplay waits until the standby has replayed the WAL up to lsn
// (pg_last_wal_replay_lsn() >= lsn), so that what the primary committed
// before lsn is visible on it, or until ctx ends.
func (c *Cluster) WaitReplay(ctx context.Context, lsn string) error {
	return c.withConn(ctx, func(conn *pgx.Conn) error {
		for {
			var done bool
			if err := conn.QueryRow(ctx, `SELECT coalesce(pg_last_wal_replay_lsn() >= $1::pg_lsn, false)`, lsn).Scan(&done); err != nil {
				return fmt.Errorf("localpg: read replay position: %w", err)
			}
			if done {
				return nil
			}
			select {
			case <-ctx.Done():
				return fmt.Errorf("localpg: wait for replay of %s: %w", lsn, ctx.Err())
			case <-time.After(5 * time.Millisecond):
			}
		}
	})
}

// withConn runs fn on a connection to the database postgres over the socket.
func (c *Cluster) withConn(ctx context.Context, fn func(*pgx.Conn) error) error {
	conn, err := pgx.Connect(ctx, c.urlFor("postgres"))
	if err != nil {
		return fmt.Errorf("localpg: connect: %w", err)
	}
	defer conn.Close(context.WithoutCancel(ctx))
	return fn(conn)
}
