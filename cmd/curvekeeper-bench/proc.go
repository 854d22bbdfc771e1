package main

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"net/http"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"syscall"
	"time"
)

// buildService compiles cmd/curvekeeper from the module at root into dir.
func buildService(ctx context.Context, root, dir string) (string, error) {
	bin := dir + "/curvekeeper"
	cmd := exec.CommandContext(ctx, "go", "build", "-o", bin, "./cmd/curvekeeper")
	cmd.Dir = root
	if out, err := cmd.CombinedOutput(); err != nil {
		return "", fmt.Errorf("build cmd/curvekeeper: %w\n%s", err, out)
	}
	return bin, nil
}

// moduleRoot is the folder of the go.mod the working directory belongs to.
func moduleRoot(ctx context.Context) (string, error) {
	out, err := exec.CommandContext(ctx, "go", "env", "GOMOD").Output()
	if err != nil {
		return "", fmt.Errorf("go env GOMOD: %w", err)
	}
	mod := strings.TrimSpace(string(out))
	if mod == "" || mod == os.DevNull {
		return "", errors.New("run the harness inside the curvekeeper module (go run ./cmd/curvekeeper-bench)")
	}
	return strings.TrimSuffix(mod, "/go.mod"), nil
}

// proc is a server started as a subprocess.
type proc struct {
	cmd     *exec.Cmd
	base    string // http://host:port
	pprof   string // http://host:port of its pprof listener, "" when off
	logPath string
	exited  chan struct{}
}

// startProc starts bin with args and env, its standard error in logPath,
// and waits until it prints the line starting with readyPrefix followed by
// its URL (and, when pprofPrefix is set, the pprof line too).
func startProc(ctx context.Context, bin string, args, env []string, logPath, readyPrefix, pprofPrefix string) (*proc, error) {
	logf, err := os.Create(logPath)
	if err != nil {
		return nil, err
	}
	defer logf.Close()
	cmd := exec.Command(bin, args...)
	cmd.Env = append(os.Environ(), env...)
	cmd.Stderr = logf
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		return nil, err
	}
	if err := cmd.Start(); err != nil {
		return nil, fmt.Errorf("start %s: %w", bin, err)
	}
	p := &proc{cmd: cmd, logPath: logPath, exited: make(chan struct{})}
	lines := make(chan string, 16) // buffered: the ready and pprof lines come back to back
	go func() {
		sc := bufio.NewScanner(stdout)
		for sc.Scan() {
			select {
			case lines <- sc.Text():
			default: // nobody waits any more: drop
			}
		}
	}()
	go func() { _ = cmd.Wait(); close(p.exited) }()
	deadline := time.After(60 * time.Second)
	for p.base == "" || (pprofPrefix != "" && p.pprof == "") {
		select {
		case l := <-lines:
			if after, ok := strings.CutPrefix(l, readyPrefix); ok {
				p.base = strings.TrimSpace(after)
			}
			if after, ok := strings.CutPrefix(l, pprofPrefix); ok && pprofPrefix != "" {
				p.pprof = strings.TrimSpace(after)
			}
		case <-p.exited:
			return nil, fmt.Errorf("%s exited before it was ready; its log:\n%s", bin, logTail(logPath))
		case <-deadline:
			p.stop()
			return nil, fmt.Errorf("%s did not say it listens within 60 s; its log:\n%s", bin, logTail(logPath))
		case <-ctx.Done():
			p.stop()
			return nil, ctx.Err()
		}
	}
	return p, nil
}

// pid is the subprocess's process id.
func (p *proc) pid() int { return p.cmd.Process.Pid }

// stop sends SIGTERM and waits for the exit (SIGKILL after 30 s).
func (p *proc) stop() {
	select {
	case <-p.exited:
		return
	default:
	}
	_ = p.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-p.exited:
	case <-time.After(30 * time.Second):
		_ = p.cmd.Process.Kill()
		<-p.exited
	}
}

// waitReady polls url every 5 ms until it answers 200.
func waitReady(ctx context.Context, url string, timeout time.Duration) error {
	cl := &http.Client{Timeout: time.Second}
	deadline := time.Now().Add(timeout)
	for {
		resp, err := cl.Get(url)
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return nil
			}
		}
		if time.Now().After(deadline) {
			return fmt.Errorf("%s not ready within %s (last error %v)", url, timeout, err)
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(5 * time.Millisecond):
		}
	}
}

// peakRSS returns the process's peak resident set size (VmHWM) in MB.
func peakRSS(pid int) (float64, error) {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		return 0, err
	}
	for _, l := range strings.Split(string(b), "\n") {
		if rest, ok := strings.CutPrefix(l, "VmHWM:"); ok {
			kb, err := strconv.ParseFloat(strings.TrimSuffix(strings.TrimSpace(rest), " kB"), 64)
			if err != nil {
				return 0, fmt.Errorf("VmHWM %q: %w", rest, err)
			}
			return kb / 1024, nil
		}
	}
	return 0, errors.New("no VmHWM in /proc status")
}

// resetPeakRSS starts a new peak for VmHWM (Linux: clear_refs value 5), so
// that each load's peak is its own.
func resetPeakRSS(pid int) error {
	return os.WriteFile(fmt.Sprintf("/proc/%d/clear_refs", pid), []byte("5"), 0)
}

func logTail(path string) string {
	b, _ := os.ReadFile(path)
	if len(b) > 2000 {
		b = b[len(b)-2000:]
	}
	return string(b)
}
