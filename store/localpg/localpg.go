// Package localpg runs a private PostgreSQL cluster for curvekeeper when no
// database server is configured: it finds the machine's PostgreSQL programs,
// creates a cluster in a data folder on first start (initdb), reuses it
// afterwards, and runs the server as a child process that listens only on a
// Unix socket (no TCP port) and accepts only its own user.
//
// Layout of the data folder:
//
//	<DataDir>/pgdata        the cluster (PGDATA)
//	<DataDir>/run           the Unix socket folder (unless the path is too long)
//	<DataDir>/postgres.log  the server's log
//
// When the process runs as root, initdb and postgres run as the postgres
// system user, which owns pgdata and run; folders above the data folder that
// it cannot search get o+x (logged).
package localpg

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"sync"
	"syscall"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
)

// Database is the database Start creates on first start; URL names it.
const Database = "curvekeeper"

// superuser is the cluster's superuser role (initdb --username), whatever
// the operating-system user.
const superuser = "postgres"

// port names the socket file (.s.PGSQL.5432); no TCP port is opened.
const port = "5432"

// maxSocketPath is the longest Unix socket path Linux accepts (sun_path is
// 108 bytes including the terminating NUL).
const maxSocketPath = 107

const tempSocketPrefix = "curvekeeper-pg-"

// Options configures Start.
type Options struct {
	// DataDir is the data folder; it is created when missing.
	DataDir string
	// Logger receives what the cluster manager does; nil discards it. The
	// server's own log goes to DataDir/postgres.log.
	Logger *slog.Logger
	// SearchPath, when non-nil, replaces PATH and /usr/lib/postgresql/*/bin
	// as the folders searched for initdb and postgres (tests use it).
	SearchPath []string
	// NoSync skips fsync in initdb and in the server (fsync, synchronous
	// commit and full-page writes off). Only for throwaway clusters such as
	// tests: a crash of the machine (not of the process) can corrupt them.
	NoSync bool
	// StartTimeout bounds the wait for the server to accept connections and
	// for a server left over by an earlier run to stop; 30 s when zero.
	StartTimeout time.Duration
	// Settings are extra server settings, each "name=value", passed to
	// postgres with -c (they win over postgresql.conf and ALTER SYSTEM).
	// Tests use them for a small shared_buffers, fewer connections and
	// synchronous_standby_names.
	Settings []string
}

// Cluster is a running private PostgreSQL server.
type Cluster struct {
	dataDir    string
	pgData     string
	socketDir  string
	tempSocket bool // socketDir was made under os.TempDir and is removed on Stop
	logPath    string
	log        *slog.Logger

	lock    *os.File // flock'd DataDir/localpg.lock, held while the cluster runs
	pid     int
	exited  chan struct{} // closed once the server process has been reaped
	waitErr error         // the server's exit status; read after exited

	stopOnce sync.Once
	stopErr  error

	bins binaries
	acct account
}

// Start starts the cluster in opt.DataDir, creating it first when the folder
// holds none, and returns once the server accepts connections on its socket
// and the database curvekeeper exists.
func Start(ctx context.Context, opt Options) (*Cluster, error) {
	return start(ctx, opt, nil)
}

// start is Start; with primary set, a cluster missing from opt.DataDir is
// made as a streaming standby of primary (see StartStandby) instead of by
// initdb.
func start(ctx context.Context, opt Options, primary *standbySource) (*Cluster, error) {
	if opt.DataDir == "" {
		return nil, errors.New("localpg: no data folder given")
	}
	log := opt.Logger
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	timeout := opt.StartTimeout
	if timeout <= 0 {
		timeout = 30 * time.Second
	}
	dataDir, err := filepath.Abs(opt.DataDir)
	if err != nil {
		return nil, fmt.Errorf("localpg: data folder %s: %w", opt.DataDir, err)
	}
	c := &Cluster{
		dataDir: dataDir,
		pgData:  filepath.Join(dataDir, "pgdata"),
		logPath: filepath.Join(dataDir, "postgres.log"),
		log:     log,
		exited:  make(chan struct{}),
	}

	wantMajor := ""
	if b, err := os.ReadFile(filepath.Join(c.pgData, "PG_VERSION")); err == nil {
		wantMajor = strings.TrimSpace(string(b))
	}
	fresh := wantMajor == ""
	if fresh && primary != nil {
		wantMajor = primary.major // a standby runs the primary's major version
	}
	bins, err := findBinaries(searchDirs(opt.SearchPath), wantMajor)
	if err != nil {
		return nil, err
	}
	acct, err := serverAccount()
	if err != nil {
		return nil, err
	}
	if err := prepareDataDir(dataDir, acct, log); err != nil {
		return nil, err
	}
	if c.lock, err = lockDataDir(dataDir); err != nil {
		return nil, err
	}
	ok := false
	defer func() {
		if !ok {
			c.lock.Close()
		}
	}()
	c.bins, c.acct = bins, acct
	switch {
	case fresh && primary != nil:
		if err := c.basebackup(ctx, primary, opt.NoSync); err != nil {
			return nil, err
		}
	case fresh:
		if err := c.initdb(ctx, bins, acct, opt.NoSync); err != nil {
			return nil, err
		}
	}
	if err := acct.own(c.pgData); err != nil {
		return nil, err
	}
	if err := clearLeftovers(ctx, c.pgData, timeout, log); err != nil {
		return nil, err
	}
	if err := c.makeSocketDir(acct); err != nil {
		return nil, err
	}
	if err := c.startServer(bins, acct, opt.NoSync, opt.Settings); err != nil {
		c.removeTempSocketDir()
		return nil, err
	}
	if err := c.waitReady(ctx, timeout); err != nil {
		_ = c.Stop(context.WithoutCancel(ctx))
		return nil, err
	}
	ok = true
	log.Info("localpg: PostgreSQL ready", "data_dir", dataDir, "socket_dir", c.socketDir, "pid", c.pid, "bin_dir", bins.dir)
	return c, nil
}

// URL returns a connection URL for the database curvekeeper over the
// server's Unix socket, such as
// postgres://postgres@/curvekeeper?host=%2Fdata%2Frun&port=5432&sslmode=disable.
func (c *Cluster) URL() string { return c.urlFor(Database) }

func (c *Cluster) urlFor(db string) string {
	q := url.Values{"host": {c.socketDir}, "port": {port}, "sslmode": {"disable"}}
	u := url.URL{Scheme: "postgres", User: url.User(superuser), Host: "", Path: "/" + db, RawQuery: q.Encode()}
	return u.String()
}

// SocketDir returns the folder holding the server's Unix socket.
func (c *Cluster) SocketDir() string { return c.socketDir }

// DataDir returns the absolute data folder.
func (c *Cluster) DataDir() string { return c.dataDir }

// PID returns the process id of the server (the postmaster).
func (c *Cluster) PID() int { return c.pid }

// Stop shuts the server down fast (SIGINT: open transactions are rolled
// back, a checkpoint is written) and waits for it and all its processes to
// exit. When ctx ends first it escalates to an immediate shutdown (SIGQUIT)
// and, 5 s later, SIGKILL of the server's process group. Calling Stop again
// returns the first result.
func (c *Cluster) Stop(ctx context.Context) error {
	c.stopOnce.Do(func() { c.stopErr = c.stop(ctx) })
	return c.stopErr
}

func (c *Cluster) stop(ctx context.Context) error {
	defer c.lock.Close() // after the server is gone: releases the data folder
	defer c.removeTempSocketDir()
	select {
	case <-c.exited:
		return c.exitError("before Stop")
	default:
	}
	if err := syscall.Kill(c.pid, syscall.SIGINT); err != nil && !errors.Is(err, syscall.ESRCH) {
		return fmt.Errorf("localpg: signal server pid %d: %w", c.pid, err)
	}
	select {
	case <-c.exited:
		c.log.Info("localpg: PostgreSQL stopped", "data_dir", c.dataDir)
		return nil
	case <-ctx.Done():
	}
	c.log.Warn("localpg: PostgreSQL did not stop in time; immediate shutdown", "pid", c.pid)
	_ = syscall.Kill(c.pid, syscall.SIGQUIT)
	select {
	case <-c.exited:
	case <-time.After(5 * time.Second):
		_ = syscall.Kill(-c.pid, syscall.SIGKILL)
		<-c.exited
	}
	// Children of an immediately stopped or killed postmaster share its
	// process group (Setpgid); make sure none is left.
	_ = syscall.Kill(-c.pid, syscall.SIGKILL)
	return fmt.Errorf("localpg: PostgreSQL did not finish a fast shutdown in time (%w); it was stopped immediately and will recover from its log on the next start", ctx.Err())
}

func (c *Cluster) exitError(when string) error {
	if c.waitErr != nil {
		return fmt.Errorf("localpg: PostgreSQL exited %s: %w; see %s", when, c.waitErr, c.logPath)
	}
	return fmt.Errorf("localpg: PostgreSQL exited %s; see %s", when, c.logPath)
}

// prepareDataDir creates the data folder and checks that it is writable.
func prepareDataDir(dir string, acct account, log *slog.Logger) error {
	if err := os.MkdirAll(dir, 0o700); err != nil {
		return fmt.Errorf("localpg: cannot create data folder %s: %w", dir, unwrapPath(err))
	}
	probe, err := os.CreateTemp(dir, ".write-test-")
	if err != nil {
		return fmt.Errorf("localpg: data folder %s is not writable: %w", dir, unwrapPath(err))
	}
	probe.Close()
	os.Remove(probe.Name())
	return acct.makeTraversable(dir, log)
}

// lockDataDir takes an exclusive flock on DataDir/localpg.lock, so two
// curvekeeper processes never run a server on one data folder. The lock dies
// with our process (even on SIGKILL), and the file is close-on-exec, so the
// server does not inherit it: once we hold the lock, any server still
// running on the folder is an orphan of an earlier run.
func lockDataDir(dir string) (*os.File, error) {
	f, err := os.OpenFile(filepath.Join(dir, "localpg.lock"), os.O_CREATE|os.O_RDWR, 0o600)
	if err != nil {
		return nil, fmt.Errorf("localpg: lock data folder: %w", err)
	}
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		f.Close()
		if errors.Is(err, syscall.EWOULDBLOCK) {
			return nil, fmt.Errorf("localpg: data folder %s is in use by another running curvekeeper; stop that one or choose another data folder", dir)
		}
		return nil, fmt.Errorf("localpg: lock data folder %s: %w", dir, err)
	}
	return f, nil
}

// unwrapPath drops the path from an *fs.PathError whose path the message
// already names, keeping errors.Is working on the cause.
func unwrapPath(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return fmt.Errorf("%s: %w", pe.Op, pe.Err)
	}
	return err
}

// initdb creates the cluster in a scratch folder and renames it into place,
// so a crash during initdb never leaves a half-made pgdata behind.
func (c *Cluster) initdb(ctx context.Context, bins binaries, acct account, noSync bool) error {
	if _, err := os.Stat(c.pgData); err == nil {
		return fmt.Errorf("localpg: %s exists but holds no PG_VERSION, so it is not a PostgreSQL cluster; move it away or choose another data folder", c.pgData)
	}
	scratch := c.pgData + ".initdb"
	if err := os.RemoveAll(scratch); err != nil {
		return fmt.Errorf("localpg: remove half-made cluster: %w", err)
	}
	if err := os.Mkdir(scratch, 0o700); err != nil {
		return fmt.Errorf("localpg: %w", err)
	}
	if err := acct.own(scratch); err != nil {
		return err
	}
	args := []string{"-D", scratch, "--username=" + superuser, "--auth-local=trust", "--auth-host=reject",
		"--encoding=UTF8", "--locale=C"}
	if noSync {
		args = append(args, "--no-sync")
	}
	start := time.Now()
	cmd := exec.CommandContext(ctx, bins.initdb, args...)
	cmd.Dir = c.dataDir
	cmd.Env = serverEnv()
	cmd.SysProcAttr = &syscall.SysProcAttr{Credential: acct.credential()}
	out, err := cmd.CombinedOutput()
	if err != nil {
		os.RemoveAll(scratch)
		return fmt.Errorf("localpg: initdb failed: %w: %s", err, tail(string(out), 8))
	}
	if err := os.Rename(scratch, c.pgData); err != nil {
		return fmt.Errorf("localpg: %w", err)
	}
	c.log.Info("localpg: created PostgreSQL cluster", "data_dir", c.pgData, "took", time.Since(start).Round(time.Millisecond))
	return nil
}

// makeSocketDir picks the socket folder: <DataDir>/run, or a fresh folder
// under os.TempDir when that path would make the socket path longer than
// the kernel allows.
func (c *Cluster) makeSocketDir(acct account) error {
	socketFile := "/.s.PGSQL." + port
	dir := filepath.Join(c.dataDir, "run")
	if len(dir)+len(socketFile) <= maxSocketPath {
		if err := os.MkdirAll(dir, 0o700); err != nil {
			return fmt.Errorf("localpg: socket folder: %w", err)
		}
		c.socketDir = dir
		return acct.own(dir)
	}
	dir, err := os.MkdirTemp("", tempSocketPrefix)
	if err != nil {
		return fmt.Errorf("localpg: socket folder: %w", err)
	}
	c.socketDir, c.tempSocket = dir, true
	if len(dir)+len(socketFile) > maxSocketPath {
		c.removeTempSocketDir()
		return fmt.Errorf("localpg: the socket path would exceed %d bytes both in the data folder and in the temp folder %s; choose a shorter data folder or TMPDIR", maxSocketPath, os.TempDir())
	}
	c.log.Info("localpg: data folder path too long for a Unix socket; using a folder under the temp folder", "socket_dir", dir)
	return acct.own(dir)
}

func (c *Cluster) removeTempSocketDir() {
	if c.tempSocket {
		os.RemoveAll(c.socketDir)
	}
}

// maxLogSize is the size past which postgres.log is moved to postgres.log.1
// at start.
const maxLogSize = 8 << 20

// startServer starts postgres as a child process. The process is started
// from a goroutine locked to its OS thread, which stays alive (in Wait)
// exactly as long as the server: Pdeathsig fires when the thread that
// started the child exits, so this ties the signal to the death of our
// process and not to an arbitrary thread ending. If curvekeeper dies without
// Stop (even SIGKILL), the server gets SIGINT and shuts down fast.
func (c *Cluster) startServer(bins binaries, acct account, noSync bool, settings []string) error {
	if fi, err := os.Stat(c.logPath); err == nil && fi.Size() > maxLogSize {
		_ = os.Rename(c.logPath, c.logPath+".1")
	}
	logFile, err := os.OpenFile(c.logPath, os.O_CREATE|os.O_WRONLY|os.O_APPEND, 0o600)
	if err != nil {
		return fmt.Errorf("localpg: open server log: %w", err)
	}
	defer logFile.Close() // the child holds its own copy

	args := []string{"-D", c.pgData, "-k", c.socketDir, "-p", port,
		"-c", "listen_addresses=", "-c", "unix_socket_permissions=0700"}
	if noSync {
		args = append(args, "-c", "fsync=off", "-c", "synchronous_commit=off", "-c", "full_page_writes=off")
	}
	for _, kv := range settings {
		args = append(args, "-c", kv)
	}
	cmd := exec.Command(bins.postgres, args...)
	cmd.Dir = c.pgData
	cmd.Env = serverEnv()
	cmd.Stdout, cmd.Stderr = logFile, logFile
	cmd.SysProcAttr = &syscall.SysProcAttr{
		Setpgid:    true, // a Ctrl-C in the terminal reaches the service, which stops the server after draining
		Pdeathsig:  syscall.SIGINT,
		Credential: acct.credential(),
	}

	started := make(chan error, 1)
	go func() {
		runtime.LockOSThread() // never unlocked: the thread ends with this goroutine, after the server
		if err := cmd.Start(); err != nil {
			started <- err
			return
		}
		started <- nil
		c.waitErr = cmd.Wait()
		close(c.exited)
	}()
	if err := <-started; err != nil {
		return fmt.Errorf("localpg: start %s: %w", bins.postgres, err)
	}
	c.pid = cmd.Process.Pid
	return nil
}

// serverEnv is our environment without PG* variables, which would change
// the programs' defaults (PGPORT would rename the socket, for one).
func serverEnv() []string {
	var env []string
	for _, kv := range os.Environ() {
		if !strings.HasPrefix(kv, "PG") {
			env = append(env, kv)
		}
	}
	return env
}

// waitReady polls a connection over the socket until the server accepts
// it, then creates the database curvekeeper when missing.
func (c *Cluster) waitReady(ctx context.Context, timeout time.Duration) error {
	ctx, cancel := context.WithTimeout(ctx, timeout)
	defer cancel()
	cfg, err := pgx.ParseConfig(c.urlFor("postgres"))
	if err != nil {
		return fmt.Errorf("localpg: %w", err)
	}
	cfg.ConnectTimeout = 2 * time.Second
	var lastErr error
	for {
		select {
		case <-c.exited:
			return fmt.Errorf("localpg: PostgreSQL exited during start (%v); last lines of %s: %s", c.waitErr, c.logPath, c.logTail())
		default:
		}
		conn, err := pgx.ConnectConfig(ctx, cfg)
		if err == nil {
			defer conn.Close(context.WithoutCancel(ctx))
			return createDatabase(ctx, conn)
		}
		lastErr = err
		select {
		case <-ctx.Done():
			return fmt.Errorf("localpg: PostgreSQL did not accept connections on %s within %s (%v); last lines of %s: %s",
				c.socketDir, timeout, lastErr, c.logPath, c.logTail())
		case <-c.exited:
		case <-time.After(15 * time.Millisecond):
		}
	}
}

func createDatabase(ctx context.Context, conn *pgx.Conn) error {
	var exists bool
	if err := conn.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_database WHERE datname = $1)`, Database).Scan(&exists); err != nil {
		return fmt.Errorf("localpg: look up database %s: %w", Database, err)
	}
	if exists {
		return nil
	}
	_, err := conn.Exec(ctx, `CREATE DATABASE `+pgx.Identifier{Database}.Sanitize())
	var pgErr *pgconn.PgError
	if err != nil && !(errors.As(err, &pgErr) && pgErr.Code == "42P04") { // duplicate_database
		return fmt.Errorf("localpg: create database %s: %w", Database, err)
	}
	return nil
}

func (c *Cluster) logTail() string {
	b, err := os.ReadFile(c.logPath)
	if err != nil {
		return "(no log: " + err.Error() + ")"
	}
	return tail(string(b), 10)
}

// tail returns the last n non-empty lines of s joined with " | ", so an
// error stays on one line.
func tail(s string, n int) string {
	lines := strings.FieldsFunc(s, func(r rune) bool { return r == '\n' })
	if len(lines) > n {
		lines = lines[len(lines)-n:]
	}
	return strings.Join(lines, " | ")
}
