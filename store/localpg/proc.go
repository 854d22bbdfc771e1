package localpg

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"time"
)

// pidFile is what postmaster.pid tells: line 1 the postmaster's pid, line 5
// its first Unix socket folder.
type pidFile struct {
	pid       int
	socketDir string
}

func readPidFile(pgData string) (pidFile, bool) {
	f, err := os.Open(filepath.Join(pgData, "postmaster.pid"))
	if err != nil {
		return pidFile{}, false
	}
	defer f.Close()
	var lines []string
	sc := bufio.NewScanner(f)
	for sc.Scan() && len(lines) < 8 {
		lines = append(lines, sc.Text())
	}
	pid, err := strconv.Atoi(strings.TrimSpace(first(lines)))
	if err != nil || pid <= 0 {
		return pidFile{}, false
	}
	pf := pidFile{pid: pid}
	if len(lines) >= 5 {
		pf.socketDir = strings.TrimSpace(lines[4])
	}
	return pf, true
}

func first(s []string) string {
	if len(s) == 0 {
		return ""
	}
	return s[0]
}

// alive reports whether a process with this pid exists and has not exited
// (a zombie has).
func alive(pid int) bool {
	st := processState(pid)
	return st != "" && st != "Z" && st != "X"
}

// processesIn returns the processes whose working folder is dir. The
// postmaster and every backend of a cluster chdir to its data folder, so
// this finds a cluster's processes even when postmaster.pid is gone or lies.
func processesIn(dir string) []int {
	ents, err := os.ReadDir("/proc")
	if err != nil {
		return nil
	}
	var pids []int
	for _, e := range ents {
		pid, err := strconv.Atoi(e.Name())
		if err != nil {
			continue
		}
		if cwd, err := os.Readlink("/proc/" + e.Name() + "/cwd"); err == nil && cwd == dir {
			pids = append(pids, pid)
		}
	}
	return pids
}

// clearLeftovers makes the data folder startable after an earlier run of
// the service died without stopping its server (SIGKILL, a panic). The
// caller holds the data folder's lock (lockDataDir), so no live curvekeeper
// owns a server found here:
//
//   - If postmaster.pid names a live process that works in this data folder,
//     a server from the earlier run is still up. It is shut down (SIGINT, a
//     fast shutdown; SIGQUIT after half the wait) and a fresh one is started
//     afterwards, so the new server is our child with our settings, socket and
//     log. Reusing it is not attempted.
//   - If postmaster.pid names a live process that does not work in this data
//     folder, the pid was reused by an unrelated process after a crash;
//     PostgreSQL would refuse to start, so the stale file is removed.
//   - If the process is gone, PostgreSQL itself overwrites the stale file.
//
// Backends orphaned by a killed postmaster exit by themselves when they see
// it die; they are waited for (SIGQUIT after a while) since a new postmaster
// refuses to start while they hold the old shared memory.
func clearLeftovers(ctx context.Context, pgData string, wait time.Duration, log *slog.Logger) error {
	if real, err := filepath.EvalSymlinks(pgData); err == nil {
		pgData = real // /proc/<pid>/cwd shows the resolved path
	}
	pf, ok := readPidFile(pgData)
	if ok {
		if err := settlePidFile(pf, pgData, log); err != nil {
			return err
		}
	}
	if ok && pf.socketDir != "" {
		defer removeOldTempSocketDir(pf.socketDir, pgData)
	}
	return waitGone(ctx, pgData, wait)
}

func settlePidFile(pf pidFile, pgData string, log *slog.Logger) error {
	removeIt := func(why string) error {
		log.Warn("localpg: removing stale postmaster.pid: "+why, "pid", pf.pid)
		if err := os.Remove(filepath.Join(pgData, "postmaster.pid")); err != nil && !errors.Is(err, os.ErrNotExist) {
			return fmt.Errorf("localpg: remove stale postmaster.pid: %w", err)
		}
		return nil
	}
	switch state := processState(pf.pid); state {
	case "":
		return nil // gone: PostgreSQL overwrites the file itself
	case "Z", "X":
		// Exited but not yet reaped; kill(pid, 0) still succeeds, so
		// PostgreSQL would take it for a running server.
		return removeIt("its process has exited")
	}
	cwd, err := os.Readlink(fmt.Sprintf("/proc/%d/cwd", pf.pid))
	switch {
	case err == nil && cwd == pgData:
		log.Warn("localpg: a PostgreSQL server from an earlier run still serves this data folder; shutting it down to start a fresh one",
			"pid", pf.pid, "data_dir", pgData)
		if err := syscall.Kill(pf.pid, syscall.SIGINT); err != nil && !errors.Is(err, syscall.ESRCH) {
			return fmt.Errorf("localpg: stop the earlier server (pid %d): %w", pf.pid, err)
		}
	case err == nil:
		return removeIt("the pid now belongs to an unrelated process (" + cwd + ")")
	}
	// cwd unreadable: not ours to judge; PostgreSQL decides.
	return nil
}

// processState returns the state letter of /proc/<pid>/stat ("R", "S",
// "Z"...), or "" when there is no such process.
func processState(pid int) string {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
	if err != nil {
		return ""
	}
	s := string(b)
	i := strings.LastIndexByte(s, ')')
	if i < 0 || i+3 > len(s) {
		return ""
	}
	return s[i+2 : i+3]
}

// waitGone waits until no process works in pgData, sending SIGQUIT
// (immediate shutdown; PostgreSQL recovers from its WAL on the next start)
// once half of wait has passed.
func waitGone(ctx context.Context, pgData string, wait time.Duration) error {
	start := time.Now()
	quit := false
	for {
		pids := processesIn(pgData)
		if len(pids) == 0 {
			return nil
		}
		if !quit && time.Since(start) > wait/2 {
			for _, pid := range pids {
				_ = syscall.Kill(pid, syscall.SIGQUIT)
			}
			quit = true
		}
		if time.Since(start) > wait {
			return fmt.Errorf("localpg: processes %v from an earlier PostgreSQL server still use the data folder %s after %s; stop them and start again", pids, pgData, wait)
		}
		select {
		case <-ctx.Done():
			return fmt.Errorf("localpg: wait for the earlier server to stop: %w", ctx.Err())
		case <-time.After(20 * time.Millisecond):
		}
	}
}

// removeOldTempSocketDir removes a socket folder an earlier run made under
// the temp folder (see socketDirFor), once its server is gone.
func removeOldTempSocketDir(dir, pgData string) {
	if filepath.Dir(dir) != filepath.Clean(os.TempDir()) || !strings.HasPrefix(filepath.Base(dir), tempSocketPrefix) {
		return
	}
	if len(processesIn(pgData)) > 0 {
		return
	}
	_ = os.RemoveAll(dir)
}
