package localpg

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// helperEnv, when set, makes the test binary act as a stand-in for the
// service: it starts a cluster in the named folder, writes a row, prints
// "READY <postmaster pid>" and waits to be killed.
const helperEnv = "LOCALPG_TEST_HELPER_DIR"

func TestMain(m *testing.M) {
	if dir := os.Getenv(helperEnv); dir != "" {
		os.Exit(runHelper(dir))
	}
	os.Exit(m.Run())
}

func runHelper(dir string) int {
	ctx := context.Background()
	c, err := Start(ctx, Options{DataDir: dir, NoSync: true})
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	conn, err := pgx.Connect(ctx, c.URL())
	if err == nil {
		_, err = conn.Exec(ctx, `CREATE TABLE crash_check (note text); INSERT INTO crash_check VALUES ('written before the kill')`)
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	fmt.Printf("READY %d\n", c.PID())
	select {} // killed by the test
}

func startCluster(t *testing.T, dir string) *Cluster {
	t.Helper()
	c, err := Start(context.Background(), Options{DataDir: dir, NoSync: true})
	if err != nil {
		t.Fatalf("Start(%s): %v", dir, err)
	}
	t.Cleanup(func() { _ = c.Stop(context.Background()) })
	return c
}

func stopCluster(t *testing.T, c *Cluster) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	if err := c.Stop(ctx); err != nil {
		t.Fatalf("Stop: %v", err)
	}
}

func query(t *testing.T, url, sql string) string {
	t.Helper()
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatalf("connect %s: %v", url, err)
	}
	defer conn.Close(ctx)
	var got string
	if err := conn.QueryRow(ctx, sql).Scan(&got); err != nil {
		t.Fatalf("%s: %v", sql, err)
	}
	return got
}

func exec1(t *testing.T, url, sql string) {
	t.Helper()
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatalf("connect: %v", err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, sql); err != nil {
		t.Fatalf("%s: %v", sql, err)
	}
}

// assertGone fails unless no process with the pid exists and no process
// works in the cluster's data folder.
func assertGone(t *testing.T, c *Cluster, pid int) {
	t.Helper()
	if _, err := os.Stat(fmt.Sprintf("/proc/%d", pid)); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("postmaster pid %d still exists after Stop (stat err %v)", pid, err)
	}
	pgData, _ := filepath.EvalSymlinks(c.pgData)
	if pids := processesIn(pgData); len(pids) != 0 {
		t.Errorf("processes %v still work in %s after Stop", pids, pgData)
	}
}

func TestStartRestartStop(t *testing.T) {
	t.Parallel()
	dir := filepath.Join(t.TempDir(), "data")
	c := startCluster(t, dir)

	if got, want := c.DataDir(), dir; got != want {
		t.Errorf("DataDir() = %q, want %q", got, want)
	}
	if got, want := c.SocketDir(), filepath.Join(dir, "run"); got != want {
		t.Errorf("SocketDir() = %q, want %q", got, want)
	}
	if got, want := query(t, c.URL(), `SELECT current_database()`), Database; got != want {
		t.Errorf("current_database() = %q, want %q", got, want)
	}
	if got, want := query(t, c.URL(), `SELECT current_setting('listen_addresses')`), ""; got != want {
		t.Errorf("listen_addresses = %q, want %q (no TCP)", got, want)
	}
	exec1(t, c.URL(), `CREATE TABLE kept (v text); INSERT INTO kept VALUES ('across restarts')`)
	firstPID := c.PID()
	stopCluster(t, c)
	assertGone(t, c, firstPID)
	if err := c.Stop(context.Background()); err != nil {
		t.Errorf("second Stop = %v, want nil", err)
	}

	c2 := startCluster(t, dir)
	if got, want := query(t, c2.URL(), `SELECT v FROM kept`), "across restarts"; got != want {
		t.Errorf("after restart: kept.v = %q, want %q", got, want)
	}
	pid := c2.PID()
	stopCluster(t, c2)
	assertGone(t, c2, pid)
}

func TestRunsAsPostgresUserWhenRoot(t *testing.T) {
	if os.Geteuid() != 0 {
		t.Skip("only meaningful as root")
	}
	t.Parallel()
	dir := filepath.Join(t.TempDir(), "data") // t.TempDir is 0700 root
	c := startCluster(t, dir)
	acct, err := serverAccount()
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range []string{c.pgData, c.socketDir} {
		fi, err := os.Stat(p)
		if err != nil {
			t.Fatal(err)
		}
		if got, want := fi.Sys().(*syscall.Stat_t).Uid, acct.uid; got != want {
			t.Errorf("owner of %s = %d, want %d (postgres)", p, got, want)
		}
	}
	status, err := os.ReadFile(fmt.Sprintf("/proc/%d/status", c.PID()))
	if err != nil {
		t.Fatal(err)
	}
	wantUID := fmt.Sprintf("Uid:\t%d\t", acct.uid)
	if !strings.Contains(string(status), wantUID) {
		t.Errorf("server process status has no %q line:\n%s", wantUID, status)
	}
	if got, want := query(t, c.URL(), `SELECT current_user`), superuser; got != want {
		t.Errorf("current_user = %q, want %q", got, want)
	}
}

func TestDeepDataDirUsesShortSocketDir(t *testing.T) {
	t.Parallel()
	dir := filepath.Join(t.TempDir(), strings.Repeat("d", 60), strings.Repeat("e", 60))
	if len(filepath.Join(dir, "run", ".s.PGSQL.5432")) <= maxSocketPath {
		t.Fatalf("test data folder %s is not deep enough", dir)
	}
	c := startCluster(t, dir)
	sock := c.SocketDir()
	if got, want := filepath.Dir(sock), filepath.Clean(os.TempDir()); got != want {
		t.Errorf("SocketDir() = %q, want a folder directly under %q", sock, want)
	}
	if got := len(filepath.Join(sock, ".s.PGSQL.5432")); got > maxSocketPath {
		t.Errorf("socket path is %d bytes, want <= %d", got, maxSocketPath)
	}
	if got, want := query(t, c.URL(), `SELECT 'ok'`), "ok"; got != want {
		t.Errorf("query over the short socket = %q, want %q", got, want)
	}
	stopCluster(t, c)
	if _, err := os.Stat(sock); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("temp socket folder %s left after Stop (stat err %v)", sock, err)
	}
}

func TestNoBinaries(t *testing.T) {
	t.Parallel()
	empty := t.TempDir()
	dataDir := filepath.Join(t.TempDir(), "data")
	_, err := Start(context.Background(), Options{DataDir: dataDir, SearchPath: []string{empty}})
	if !errors.Is(err, ErrNoBinaries) {
		t.Fatalf("Start with no binaries: err = %v, want ErrNoBinaries", err)
	}
	msg := err.Error()
	for _, want := range []string{"apt-get install postgresql", "DATABASE_URL", empty} {
		if !strings.Contains(msg, want) {
			t.Errorf("error %q does not mention %q", msg, want)
		}
	}
	if strings.Contains(msg, "\n") {
		t.Errorf("error is not one paragraph: %q", msg)
	}
	if _, err := os.Stat(dataDir); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("data folder was created although no binaries exist (stat err %v)", err)
	}
}

func TestWrongMajorVersion(t *testing.T) {
	t.Parallel()
	dataDir := filepath.Join(t.TempDir(), "data")
	if err := os.MkdirAll(filepath.Join(dataDir, "pgdata"), 0o700); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dataDir, "pgdata", "PG_VERSION"), []byte("7\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	_, err := Start(context.Background(), Options{DataDir: dataDir})
	if err == nil || !strings.Contains(err.Error(), "made by PostgreSQL 7") {
		t.Fatalf("Start on a version-7 cluster: err = %v, want one naming version 7", err)
	}
}

func TestUnwritableDataDir(t *testing.T) {
	t.Parallel()
	file := filepath.Join(t.TempDir(), "a-file")
	if err := os.WriteFile(file, nil, 0o600); err != nil {
		t.Fatal(err)
	}
	readOnly := filepath.Join(t.TempDir(), "ro")
	if err := os.Mkdir(readOnly, 0o500); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name     string
		dir      string
		rootSkip bool // root writes into a 0500 folder anyway
	}{
		{"parent is a file", filepath.Join(file, "data"), false},
		{"read-only folder", readOnly, true},
		{"read-only file system", "/proc/curvekeeper-data", false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if tt.rootSkip && os.Geteuid() == 0 {
				t.Skip("root can write into a 0500 folder")
			}
			_, err := Start(context.Background(), Options{DataDir: tt.dir})
			if err == nil {
				t.Fatal("Start succeeded, want an error")
			}
			msg := err.Error()
			if !strings.Contains(msg, tt.dir) || strings.Contains(msg, "\n") {
				t.Errorf("error %q: want one line naming %s", msg, tt.dir)
			}
		})
	}
}

func TestSecondStartOnSameDirRefused(t *testing.T) {
	t.Parallel()
	dir := filepath.Join(t.TempDir(), "data")
	c := startCluster(t, dir)
	_, err := Start(context.Background(), Options{DataDir: dir, NoSync: true})
	if err == nil || !strings.Contains(err.Error(), "in use by another running curvekeeper") {
		t.Fatalf("second Start: err = %v, want an in-use error", err)
	}
	if got, want := query(t, c.URL(), `SELECT 'still up'`), "still up"; got != want {
		t.Errorf("first cluster after refused second Start: %q, want %q", got, want)
	}
}

// TestOrphanedServerIsReplaced covers a server that survived the death of
// the process that started it (Pdeathsig not in play: the server here is
// started by hand, as a service killed with its signal ignored would leave).
func TestOrphanedServerIsReplaced(t *testing.T) {
	t.Parallel()
	dir := filepath.Join(t.TempDir(), "data")
	c := startCluster(t, dir)
	stopCluster(t, c)

	bins, err := findBinaries(searchDirs(nil), "")
	if err != nil {
		t.Fatal(err)
	}
	acct, err := serverAccount()
	if err != nil {
		t.Fatal(err)
	}
	sock, err := os.MkdirTemp("", "orphan-")
	if err != nil {
		t.Fatal(err)
	}
	defer os.RemoveAll(sock)
	if err := acct.own(sock); err != nil {
		t.Fatal(err)
	}
	orphan := exec.Command(bins.postgres, "-D", c.pgData, "-k", sock, "-c", "listen_addresses=")
	orphan.SysProcAttr = &syscall.SysProcAttr{Credential: acct.credential(), Setpgid: true}
	if err := orphan.Start(); err != nil {
		t.Fatal(err)
	}
	orphanDone := make(chan error, 1)
	go func() { orphanDone <- orphan.Wait() }()
	t.Cleanup(func() { _ = syscall.Kill(-orphan.Process.Pid, syscall.SIGKILL) })
	waitFor(t, 20*time.Second, "hand-started server ready", func() bool {
		pf, ok := readPidFile(c.pgData)
		return ok && pf.pid == orphan.Process.Pid && socketExists(sock)
	})

	c2 := startCluster(t, dir)
	select {
	case <-orphanDone:
	case <-time.After(5 * time.Second):
		t.Fatalf("the hand-started server (pid %d) still runs after Start", orphan.Process.Pid)
	}
	if c2.PID() == orphan.Process.Pid {
		t.Errorf("Start reused pid %d, want a fresh server", c2.PID())
	}
	if got, want := query(t, c2.URL(), `SELECT 'fresh'`), "fresh"; got != want {
		t.Errorf("query = %q, want %q", got, want)
	}
}

func socketExists(dir string) bool {
	_, err := os.Stat(filepath.Join(dir, ".s.PGSQL.5432"))
	return err == nil
}

func TestStalePidFile(t *testing.T) {
	t.Parallel()
	dir := filepath.Join(t.TempDir(), "data")
	c := startCluster(t, dir)
	stopCluster(t, c)
	acct, err := serverAccount()
	if err != nil {
		t.Fatal(err)
	}

	// A live process that has nothing to do with PostgreSQL, as when a pid
	// is reused after a crash; PostgreSQL alone would refuse to start.
	unrelated := exec.Command("sleep", "60")
	if err := unrelated.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = unrelated.Process.Kill(); _ = unrelated.Wait() })
	// A process that is gone: postgres overwrites such a file itself.
	gone := exec.Command("true")
	if err := gone.Run(); err != nil {
		t.Fatal(err)
	}

	tests := []struct {
		name string
		pid  int
	}{
		{"pid reused by an unrelated process", unrelated.Process.Pid},
		{"process gone", gone.Process.Pid},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			stale := fmt.Sprintf("%d\n%s\n1700000000\n5432\n/nonexistent\n\n  5432001         0\nready   \n", tt.pid, c.pgData)
			pidPath := filepath.Join(c.pgData, "postmaster.pid")
			if err := os.WriteFile(pidPath, []byte(stale), 0o600); err != nil {
				t.Fatal(err)
			}
			if err := acct.own(pidPath); err != nil { // as the server would have left it
				t.Fatal(err)
			}
			c2 := startCluster(t, dir)
			if got, want := query(t, c2.URL(), `SELECT 'started'`), "started"; got != want {
				t.Errorf("query = %q, want %q", got, want)
			}
			stopCluster(t, c2)
		})
	}
	if !alive(unrelated.Process.Pid) {
		t.Error("Start signalled the unrelated process")
	}
}

// TestServiceKilled: the process that started the cluster dies by SIGKILL;
// the next Start must come up on the same data, with the old server gone.
func TestServiceKilled(t *testing.T) {
	t.Parallel()
	dir := filepath.Join(t.TempDir(), "data")
	helper := exec.Command(os.Args[0], "-test.run=^$")
	helper.Env = append(os.Environ(), helperEnv+"="+dir)
	helper.Stderr = os.Stderr
	out, err := helper.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := helper.Start(); err != nil {
		t.Fatal(err)
	}
	line, err := bufio.NewReader(out).ReadString('\n')
	if err != nil {
		_ = helper.Process.Kill()
		t.Fatalf("helper: %v (output %q)", err, line)
	}
	oldPID, err := strconv.Atoi(strings.TrimPrefix(strings.TrimSpace(line), "READY "))
	if err != nil {
		t.Fatalf("helper said %q", line)
	}
	if err := helper.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	_ = helper.Wait()
	go func() { _, _ = io.Copy(io.Discard, out) }()

	c := startCluster(t, dir) // at once, while the old server may still be shutting down
	if alive(oldPID) && c.PID() != oldPID {
		t.Errorf("old server pid %d still alive next to the new one %d", oldPID, c.PID())
	}
	if got, want := query(t, c.URL(), `SELECT note FROM crash_check`), "written before the kill"; got != want {
		t.Errorf("row written before the kill = %q, want %q", got, want)
	}
}

func waitFor(t *testing.T, d time.Duration, what string, ok func() bool) {
	t.Helper()
	deadline := time.Now().Add(d)
	for !ok() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out after %s waiting for %s", d, what)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

func TestSearchDirsNumericOrder(t *testing.T) {
	tests := []struct {
		dir  string
		want float64
	}{
		{"/usr/lib/postgresql/9.6/bin", 9.6},
		{"/usr/lib/postgresql/10/bin", 10},
		{"/usr/lib/postgresql/17/bin", 17},
		{"/opt/bin", -1},
	}
	for _, tt := range tests {
		if got := versionOfDir(tt.dir); got != tt.want {
			t.Errorf("versionOfDir(%q) = %v, want %v", tt.dir, got, tt.want)
		}
	}
}

// BenchmarkStart measures, side by side in one run, a cold start (initdb,
// server start, create database) with fsync as in production, the same
// with NoSync as the test harness uses, and a warm start (server start on
// an existing cluster).
func BenchmarkStart(b *testing.B) {
	ctx := context.Background()
	cold := func(noSync bool) func(b *testing.B) {
		return func(b *testing.B) {
			for i := 0; i < b.N; i++ {
				dir := filepath.Join(b.TempDir(), "data")
				c, err := Start(ctx, Options{DataDir: dir, NoSync: noSync})
				if err != nil {
					b.Fatal(err)
				}
				b.StopTimer()
				if err := c.Stop(ctx); err != nil {
					b.Fatal(err)
				}
				b.StartTimer()
			}
		}
	}
	b.Run("cold", cold(false))
	b.Run("cold-nosync", cold(true))
	b.Run("warm", func(b *testing.B) {
		dir := filepath.Join(b.TempDir(), "data")
		c, err := Start(ctx, Options{DataDir: dir})
		if err != nil {
			b.Fatal(err)
		}
		_ = c.Stop(ctx)
		b.ResetTimer()
		for i := 0; i < b.N; i++ {
			c, err := Start(ctx, Options{DataDir: dir})
			if err != nil {
				b.Fatal(err)
			}
			b.StopTimer()
			if err := c.Stop(ctx); err != nil {
				b.Fatal(err)
			}
			b.StartTimer()
		}
	})
}
