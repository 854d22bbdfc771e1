package main

import (
	"context"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
)

// profile starts a CPU profile of the service covering one scenario's
// rounds, when -profile-dir is set, and returns a function that waits for
// it and writes it to ProfileDir/<name>.pprof.
func (h *harness) profile(ctx context.Context, name string) func() {
	if h.cfg.ProfileDir == "" || h.svc == nil || h.svc.pprof == "" {
		return func() {}
	}
	secs := int(2*h.cfg.PhaseTime.Seconds())*h.cfg.Rounds + 1
	done := make(chan struct{})
	go func() {
		defer close(done)
		url := h.svc.pprof + "/debug/pprof/profile?seconds=" + strconv.Itoa(secs)
		req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
		if err != nil {
			return
		}
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			h.progress("profile %s: %v", name, err)
			return
		}
		defer resp.Body.Close()
		if err := os.MkdirAll(h.cfg.ProfileDir, 0o755); err != nil {
			return
		}
		path := filepath.Join(h.cfg.ProfileDir, name+".pprof")
		f, err := os.Create(path)
		if err != nil {
			return
		}
		defer f.Close()
		if _, err := io.Copy(f, resp.Body); err != nil {
			h.progress("profile %s: %v", name, err)
			return
		}
		h.progress("profile written to %s", path)
	}()
	return func() { <-done }
}
