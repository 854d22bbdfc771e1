package main

import (
	"context"
	"fmt"
	"net/http"
	"os"
	"path/filepath"
	"slices"
	"time"

	"curvekeeper/store/localpg"
)

// startup times the service from exec to the first 200 of /readyz with an
// existing private database (the binary is started once to create it, then
// again to be timed), against the start of that private PostgreSQL alone
// (localpg.Start of the same existing cluster, in process), the floor the
// service's start-up stands on. Medians of StartupRepeats starts each.
func (h *harness) startup(ctx context.Context) error {
	dir := filepath.Join(h.tmp, "startup")
	h.progress("startup: first start creates the private database")
	if _, err := h.timedStart(ctx, dir); err != nil {
		return err
	}
	var svc, base []float64
	for i := 0; i < h.cfg.StartupRepeats; i++ {
		t0 := time.Now()
		cl, err := localpg.Start(ctx, localpg.Options{DataDir: dir})
		if err != nil {
			return err
		}
		base = append(base, ms(time.Since(t0)))
		if err := cl.Stop(ctx); err != nil {
			return err
		}
		d, err := h.timedStart(ctx, dir)
		if err != nil {
			return err
		}
		svc = append(svc, d)
	}
	fmt.Fprintln(h.out, line{Scenario: "startup", Service: median(svc), Baseline: median(base), Unit: "ms",
		Target: target{"service", "<=", 1000}, Extra: []string{kv("baseline_is", "private PostgreSQL start alone"),
			kv("starts", len(svc)), kv("service_max_ms", slices.Max(svc))}})
	return nil
}

// timedStart starts the binary on the private database in dir, returns the
// milliseconds until /readyz answered 200, and stops it.
func (h *harness) timedStart(ctx context.Context, dir string) (float64, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return 0, err
	}
	t0 := time.Now()
	p, err := startProc(ctx, h.bin, []string{"serve", "--listen", "127.0.0.1:0", "--data-dir", dir},
		[]string{"DATABASE_URL="}, filepath.Join(h.tmp, "startup.log"), serviceLinePrefix, "")
	if err != nil {
		return 0, err
	}
	defer p.stop()
	if err := waitReady(ctx, p.base+"/readyz", 60*time.Second); err != nil {
		return 0, err
	}
	d := ms(time.Since(t0))
	cl := http.Client{Timeout: time.Second}
	if resp, err := cl.Get(p.base + "/healthz"); err == nil {
		resp.Body.Close()
	}
	return d, nil
}

func ms(d time.Duration) float64 { return float64(d.Microseconds()) / 1000 }

func median(v []float64) float64 {
	s := slices.Clone(v)
	slices.Sort(s)
	if len(s)%2 == 1 {
		return s[len(s)/2]
	}
	return (s[len(s)/2-1] + s[len(s)/2]) / 2
}
