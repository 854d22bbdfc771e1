package main

import (
	"bufio"
	"context"
	"errors"
	"io"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

// lockedBuffer collects a writer's output safely across goroutines (a
// copying goroutine writes, the test reads).
type lockedBuffer struct {
	mu sync.Mutex
	b  strings.Builder
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}

// service is run() started in a goroutine, as main would start it.
type service struct {
	addr   string
	stderr *lockedBuffer
	stop   context.CancelFunc
	done   chan error
}

// startService runs "serve" with args and waits for the line that says
// where it listens.
func startService(t *testing.T, env map[string]string, args ...string) *service {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	pr, pw := io.Pipe()
	s := &service{stderr: &lockedBuffer{}, stop: cancel, done: make(chan error, 1)}
	getenv := func(k string) string { return env[k] }
	go func() {
		err := run(ctx, append([]string{"serve", "--listen", "127.0.0.1:0"}, args...), getenv, pw, s.stderr)
		pw.Close()
		s.done <- err
	}()
	lines := make(chan string)
	go func() {
		sc := bufio.NewScanner(pr)
		for sc.Scan() {
			lines <- sc.Text()
		}
		close(lines)
	}()
	deadline := time.After(60 * time.Second)
	for s.addr == "" {
		select {
		case line, ok := <-lines:
			if !ok {
				t.Fatalf("service exited before listening: %v\nstderr:\n%s", <-s.done, s.stderr.String())
			}
			if a, found := strings.CutPrefix(line, "curvekeeper: listening on http://"); found {
				s.addr = a
			}
		case <-deadline:
			cancel()
			t.Fatalf("service did not listen within 60 s\nstderr:\n%s", s.stderr.String())
		}
	}
	go func() {
		for range lines { // drain the rest of stdout
		}
	}()
	t.Cleanup(func() { s.shutdown(t) })
	return s
}

// shutdown cancels the service (as SIGTERM does) and waits for run to return.
func (s *service) shutdown(t *testing.T) {
	t.Helper()
	if s.stop == nil {
		return
	}
	s.stop()
	s.stop = nil
	select {
	case err := <-s.done:
		if err != nil {
			t.Errorf("run returned %v after shutdown", err)
		}
	case <-time.After(60 * time.Second):
		t.Fatal("service did not stop within 60 s of its context ending")
	}
}

func getStatus(t *testing.T, url string) int {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatalf("GET %s: %v", url, err)
	}
	resp.Body.Close()
	return resp.StatusCode
}

// postmasterPID reads the pid of the private cluster's server.
func postmasterPID(t *testing.T, dataDir string) int {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(dataDir, "pgdata", "postmaster.pid"))
	if err != nil {
		t.Fatalf("read postmaster.pid: %v", err)
	}
	pid, err := strconv.Atoi(strings.TrimSpace(strings.SplitN(string(b), "\n", 2)[0]))
	if err != nil {
		t.Fatalf("parse postmaster.pid: %v", err)
	}
	return pid
}

func processAlive(pid int) bool {
	err := syscall.Kill(pid, 0)
	return err == nil || errors.Is(err, syscall.EPERM)
}

// TestServePrivateDatabase is the zero-setup path: no DATABASE_URL, a private
// cluster in the data folder, ready, stopped with the service, reused after.
func TestServePrivateDatabase(t *testing.T) {
	dataDir := filepath.Join(t.TempDir(), "data")
	s := startService(t, nil, "--data-dir", dataDir)
	if got := getStatus(t, "http://"+s.addr+"/readyz"); got != http.StatusOK {
		t.Fatalf("/readyz = %d, want 200", got)
	}
	if !strings.Contains(s.stderr.String(), "created PostgreSQL cluster") {
		t.Errorf("first start did not say it created the cluster; stderr:\n%s", s.stderr.String())
	}
	// The private cluster's superuser migrates; the service logs in as the
	// login role, neither superuser nor owner.
	if !strings.Contains(s.stderr.String(), `"msg":"database login","login":"curvekeeper_login","superuser":false,"owner":false`) {
		t.Errorf("the service did not log in as curvekeeper_login; stderr:\n%s", s.stderr.String())
	}
	if strings.Contains(s.stderr.String(), "RESET ROLE would regain") {
		t.Errorf("the private cluster's login was judged privileged; stderr:\n%s", s.stderr.String())
	}
	pid := postmasterPID(t, dataDir)
	s.shutdown(t)
	if processAlive(pid) {
		t.Errorf("PostgreSQL (pid %d) still runs after the service stopped", pid)
	}

	// A second start reuses the cluster: no initdb, data kept.
	s2 := startService(t, nil, "--data-dir", dataDir)
	if got := getStatus(t, "http://"+s2.addr+"/readyz"); got != http.StatusOK {
		t.Fatalf("/readyz after restart = %d, want 200", got)
	}
	if strings.Contains(s2.stderr.String(), "created PostgreSQL cluster") {
		t.Errorf("second start created a new cluster instead of reusing it; stderr:\n%s", s2.stderr.String())
	}
}

// TestServeDatabaseURL runs against a server named by --database-url.
func TestServeDatabaseURL(t *testing.T) {
	url := dbtest.NewURL(t)
	s := startService(t, nil, "--database-url", url)
	if got := getStatus(t, "http://"+s.addr+"/readyz"); got != http.StatusOK {
		t.Fatalf("/readyz = %d, want 200", got)
	}
	if got := getStatus(t, "http://"+s.addr+"/healthz"); got != http.StatusOK {
		t.Fatalf("/healthz = %d, want 200", got)
	}
	// The test server's user is a superuser: the service says what that risks.
	if !strings.Contains(s.stderr.String(), "RESET ROLE would regain those rights") {
		t.Errorf("no warning for a superuser login; stderr:\n%s", s.stderr.String())
	}
}

// TestServeSeparateOwner: with DATABASE_MIGRATE_URL the owner migrates and
// grants curvekeeper_app to DATABASE_URL's login role, which the service
// then works as, writes included, without any warning.
func TestServeSeparateOwner(t *testing.T) {
	ownerURL := dbtest.NewURL(t)
	ctx := context.Background()
	role := "ck_service_" + strconv.Itoa(os.Getpid()) // roles are server-wide: one per test process
	conn, err := pgx.Connect(ctx, ownerURL)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := conn.Exec(ctx, `CREATE ROLE `+pgx.Identifier{role}.Sanitize()+` LOGIN`); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if _, err := conn.Exec(ctx, `DROP ROLE IF EXISTS `+pgx.Identifier{role}.Sanitize()); err != nil {
			t.Logf("drop role %s: %v", role, err)
		}
		conn.Close(ctx)
	})
	loginURL, err := store.WithUser(ownerURL, role)
	if err != nil {
		t.Fatal(err)
	}
	const bootstrap = "ck_bootstrap-separate-owner-0123456789abcdef"
	s := startService(t, map[string]string{"CURVEKEEPER_BOOTSTRAP_TOKEN": bootstrap},
		"--database-url", loginURL, "--database-migrate-url", ownerURL)
	if got := getStatus(t, "http://"+s.addr+"/readyz"); got != http.StatusOK {
		t.Fatalf("/readyz = %d, want 200\n%s", got, s.stderr.String())
	}
	want := `"msg":"database login","login":"` + role + `","superuser":false,"owner":false`
	if !strings.Contains(s.stderr.String(), want) {
		t.Errorf("stderr lacks %s:\n%s", want, s.stderr.String())
	}
	req, _ := http.NewRequest(http.MethodGet, "http://"+s.addr+"/v1/methods", nil)
	req.Header.Set("Authorization", "Bearer "+bootstrap)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		t.Errorf("GET /v1/methods with the bootstrap token stored through the login role = %d, want 200", resp.StatusCode)
	}
}

// TestBadConfiguration: each mistake is a clear one-line error, never a
// panic or a hang.
func TestBadConfiguration(t *testing.T) {
	busy, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer busy.Close()
	notADir := filepath.Join(t.TempDir(), "file")
	if err := os.WriteFile(notADir, []byte("x"), 0o600); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name     string
		args     []string
		wantText string
		wantCode int
	}{
		{"port in use", []string{"serve", "--listen", busy.Addr().String(), "--database-url", "postgres://postgres@127.0.0.1:1/none"}, "cannot listen on", 1},
		{"unreachable database", []string{"serve", "--listen", "127.0.0.1:0", "--database-url", "postgres://postgres@127.0.0.1:1/none?connect_timeout=2"}, "cannot reach the database", 1},
		{"data folder is a file", []string{"serve", "--listen", "127.0.0.1:0", "--data-dir", notADir}, notADir, 1},
		{"unknown flag", []string{"serve", "--no-such-flag"}, "no-such-flag", 2},
		{"bad duration", []string{"serve", "--request-timeout", "soon"}, "--request-timeout", 2},
		{"unknown command", []string{"frobnicate"}, "unknown command", 2},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
			defer cancel()
			err := run(ctx, tt.args, func(string) string { return "" }, io.Discard, io.Discard)
			if err == nil {
				t.Fatal("run succeeded, want an error")
			}
			if ctx.Err() != nil {
				t.Fatal("run did not return before its 30 s deadline")
			}
			msg := err.Error()
			if !strings.Contains(msg, tt.wantText) {
				t.Errorf("error %q does not mention %q", msg, tt.wantText)
			}
			if strings.Contains(msg, "\n") {
				t.Errorf("error is not one line: %q", msg)
			}
			if got := exitCode(err); got != tt.wantCode {
				t.Errorf("exit code %d, want %d", got, tt.wantCode)
			}
		})
	}
}

// TestConfigFromEnvironment: CURVEKEEPER_* variables are read, flags win.
func TestConfigFromEnvironment(t *testing.T) {
	env := map[string]string{"CURVEKEEPER_LISTEN": ":9999", "CURVEKEEPER_DATA_DIR": "/x", "DATABASE_URL": "postgres://a@b/c",
		"CURVEKEEPER_REQUEST_TIMEOUT": "3s"}
	cfg, _, err := parseConfig("serve", []string{"--data-dir", "/y"}, func(k string) string { return env[k] }, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Listen != ":9999" || cfg.DataDir != "/y" || cfg.DatabaseURL != "postgres://a@b/c" || cfg.RequestTimeout != 3*time.Second {
		t.Errorf("got %+v", cfg)
	}
	def, _, err := parseConfig("serve", nil, func(string) string { return "" }, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	if def.Listen != "127.0.0.1:8080" || def.DataDir != "./curvekeeper-data" {
		t.Errorf("defaults: got listen %q data-dir %q", def.Listen, def.DataDir)
	}
}

// TestRedactURL: a password never shows, in any of the forms libpq accepts
// (the user part of a URL, a ?password= parameter, a key=value string).
func TestRedactURL(t *testing.T) {
	for _, tc := range []struct{ in, want string }{
		{"postgres://user:secret@db:5432/x", "postgres://user@db:5432/x"},
		{"postgres://user@db:5433/x?password=secret&sslmode=disable", "postgres://user@db:5433/x"},
		{"host=db port=5434 dbname=x user=user password=secret sslmode=disable", "postgres://user@db:5434/x"},
		{"postgres://user:secret@db:notaport/x", "(a connection string that does not parse)"},
	} {
		got := redactURL(tc.in)
		if strings.Contains(got, "secret") || got != tc.want {
			t.Errorf("redactURL(%q) = %q, want %q", tc.in, got, tc.want)
		}
	}
}

// TestMigrateCommands walks the schema down one step, reports it, and up.
func TestMigrateCommands(t *testing.T) {
	url := dbtest.NewURL(t)
	ctx := context.Background()
	getenv := func(string) string { return "" }
	var out strings.Builder
	for _, args := range [][]string{
		{"migrate", "version", "--database-url", url},
		{"migrate", "down", "1", "--database-url", url},
		{"migrate", "version", "--database-url", url},
		{"migrate", "up", "--database-url", url},
		{"migrate", "force", "1", "--database-url", url},
	} {
		if err := run(ctx, args, getenv, &out, io.Discard); err != nil {
			t.Fatalf("%v: %v", args, err)
		}
	}
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	if len(lines) != 5 {
		t.Fatalf("want 5 lines of output, got:\n%s", out.String())
	}
	if !strings.HasPrefix(lines[0], "schema version ") || strings.HasPrefix(lines[0], "schema version 0 ") {
		t.Errorf("migrated database reports %q", lines[0])
	}
	if lines[0] == lines[2] {
		t.Errorf("down 1 did not change the version: %q", lines[2])
	}
	if lines[3] != lines[0] {
		t.Errorf("up did not return to the latest version: %q vs %q", lines[3], lines[0])
	}
	if err := run(ctx, []string{"migrate", "sideways", "--database-url", url}, getenv, io.Discard, io.Discard); exitCode(err) != 2 {
		t.Errorf("unknown migrate verb: err %v", err)
	}
}

// TestFlagsAfterArguments: flags are read wherever they stand.
func TestFlagsAfterArguments(t *testing.T) {
	cfg, pos, err := parseConfig("migrate down", []string{"2", "--database-url", "postgres://x@y/z", "extra"},
		func(string) string { return "" }, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	if cfg.DatabaseURL != "postgres://x@y/z" || len(pos) != 2 || pos[0] != "2" || pos[1] != "extra" {
		t.Errorf("got url %q positional %q", cfg.DatabaseURL, pos)
	}
}

// TestHelpListsCommandsAndFlags: --help, -h and help name every subcommand
// and the flags (before, --help printed serve's flags only and help the
// commands only).
func TestHelpListsCommandsAndFlags(t *testing.T) {
	for _, args := range [][]string{{"--help"}, {"-h"}, {"help"}, {"serve", "--help"}, {"demo", "-h"}} {
		var out, errOut strings.Builder
		if err := run(context.Background(), args, func(string) string { return "" }, &out, &errOut); err != nil {
			t.Errorf("%v: %v", args, err)
			continue
		}
		text := out.String() + errOut.String()
		for _, want := range []string{"curvekeeper [serve]", "curvekeeper migrate up|down", "curvekeeper demo", "-database-url", "-database-migrate-url", "(DATABASE_URL)"} {
			if !strings.Contains(text, want) {
				t.Errorf("%v: the help lacks %q:\n%s", args, want, text)
			}
		}
	}
}
