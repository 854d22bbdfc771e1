package main

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/store/localpg"
)

// run is the whole harness; main only wires the process to it.
func run(ctx context.Context, args []string, getenv func(string) string, stdout, stderr io.Writer) error {
	if len(args) > 0 && args[0] == baselineCommand {
		return serveBaseline(ctx, args[1:], stdout)
	}
	cfg, err := parseConfig(args, getenv, stderr)
	if err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return nil
		}
		return err
	}
	h := &harness{cfg: cfg, out: stdout, log: stderr, started: time.Now()}
	defer h.close()
	return h.run(ctx)
}

// harness holds what one run set up.
type harness struct {
	cfg     config
	out     io.Writer // the logfmt lines
	log     io.Writer // progress
	started time.Time

	root, tmp, bin string
	calibTest      string // calib's test binary, "" without the fit scenario
	cluster        *localpg.Cluster
	dropDB         func()
	dbURL          string
	svc            *proc
	admin          string // bootstrap admin secret
	instrument     string // runs:write token
	lims           string // results:read token
	curveID        string // a fitted curve to predict against
	rssIngest      float64
}

func (h *harness) progress(format string, args ...any) {
	fmt.Fprintf(h.log, "[%5.1fs] %s\n", time.Since(h.started).Seconds(), fmt.Sprintf(format, args...))
}

func (h *harness) run(ctx context.Context) error {
	var err error
	if h.root, err = moduleRoot(ctx); err != nil {
		return err
	}
	if h.tmp, err = os.MkdirTemp("", "curvekeeper-bench-"); err != nil {
		return err
	}
	h.progress("building cmd/curvekeeper (and calib's benchmark)")
	calibErr := make(chan error, 1)
	go func() {
		if !h.cfg.has("fit") && !h.cfg.has("fit_4pl") {
			calibErr <- nil
			return
		}
		var err error
		h.calibTest, err = buildCalibTest(ctx, h.root, h.tmp)
		calibErr <- err
	}()
	h.bin, err = buildService(ctx, h.root, h.tmp)
	if cerr := <-calibErr; err == nil {
		err = cerr
	}
	if err != nil {
		return err
	}
	ctx, cancel := context.WithTimeout(ctx, h.cfg.Budget)
	defer cancel()
	if h.cfg.has("startup") {
		if err := h.startup(ctx); err != nil {
			return fmt.Errorf("startup: %w", err)
		}
	}
	needService := h.cfg.has("ingest") || h.cfg.has("ingest_large") || h.cfg.has("predict") || h.cfg.has("history")
	if needService || h.cfg.has("growth") {
		if err := h.openDatabase(ctx); err != nil {
			return err
		}
	}
	if needService {
		if err := h.startService(ctx); err != nil {
			return err
		}
	}
	steps := []struct {
		name string
		fn   func(context.Context) error
	}{{"ingest", h.ingest}, {"ingest_large", h.ingestLarge}, {"predict", h.predict}, {"history", h.history}, {"fit", h.fit}, {"fit_4pl", h.fit4PL}, {"growth", h.growth}}
	for _, s := range steps {
		if !h.cfg.has(s.name) {
			continue
		}
		if err := s.fn(ctx); err != nil {
			return fmt.Errorf("%s: %w", s.name, err)
		}
	}
	h.progress("done")
	return nil
}

// openDatabase makes the fresh database: a private cluster in the
// temporary folder, or a new database on the DATABASE_URL server.
func (h *harness) openDatabase(ctx context.Context) error {
	if h.cfg.DatabaseURL == "" {
		h.progress("starting a private PostgreSQL in %s", h.tmp)
		cl, err := localpg.Start(ctx, localpg.Options{DataDir: filepath.Join(h.tmp, "db")})
		if err != nil {
			return err
		}
		h.cluster, h.dbURL = cl, cl.URL()
		return nil
	}
	name := "curvekeeper_bench_" + randomHex(6)
	conn, err := pgx.Connect(ctx, h.cfg.DatabaseURL)
	if err != nil {
		return fmt.Errorf("connect to DATABASE_URL: %w", err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, "CREATE DATABASE "+name); err != nil {
		return fmt.Errorf("create database %s: %w", name, err)
	}
	if h.dbURL, err = withDatabase(h.cfg.DatabaseURL, name); err != nil {
		return err
	}
	h.dropDB = func() {
		dctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		c, err := pgx.Connect(dctx, h.cfg.DatabaseURL)
		if err != nil {
			return
		}
		defer c.Close(dctx)
		_, _ = c.Exec(dctx, "DROP DATABASE IF EXISTS "+name+" WITH (FORCE)")
	}
	return nil
}

// startService starts the service against the fresh database with a
// bootstrap admin token, then defines the bench method and tokens.
func (h *harness) startService(ctx context.Context) error {
	in, err := h.startInstance(ctx, h.dbURL, "service.log")
	if in != nil {
		h.svc = in.svc
	}
	if err != nil {
		return err
	}
	h.admin, h.instrument, h.lims, h.curveID = in.admin, in.instrument, in.lims, in.curveID
	return nil
}

// instance is one service process on its database, with the bench method,
// its tokens and one fitted curve.
type instance struct {
	svc        *proc
	admin      string // bootstrap admin secret
	instrument string // runs:write token
	lims       string // results:read token
	curveID    string // a fitted curve to predict against
}

// startInstance starts the service on dbURL (logging to logName in the
// temporary folder) with a bootstrap admin token, then defines the bench
// method and tokens and posts one run. When svc is set the caller stops it,
// also on error.
func (h *harness) startInstance(ctx context.Context, dbURL, logName string) (*instance, error) {
	in := &instance{admin: "ck_bench_" + randomHex(16)}
	// Each load runs on one token far above the default per-token rate
	// limit (50/s). A limit no load reaches keeps the limiter's own cost in
	// the measurement without throttling it.
	args := []string{"serve", "--listen", "127.0.0.1:0", "--rate-limit", "1000000", "--rate-burst", "1000000"}
	pprofPrefix := ""
	if h.cfg.ProfileDir != "" {
		args = append(args, "--pprof-listen", "127.0.0.1:0")
		pprofPrefix = pprofLinePrefix
	}
	env := []string{"DATABASE_URL=" + dbURL, "CURVEKEEPER_BOOTSTRAP_TOKEN=" + in.admin}
	h.progress("starting the service (%s)", logName)
	svc, err := startProc(ctx, h.bin, args, env, filepath.Join(h.tmp, logName), serviceLinePrefix, pprofPrefix)
	if err != nil {
		return nil, err
	}
	in.svc = svc
	if err := waitReady(ctx, svc.base+"/readyz", 30*time.Second); err != nil {
		return in, err
	}
	cl := newClient(2)
	method := map[string]any{"name": benchMethod, "model": "linear", "weighting": "1/x^2",
		"analytes": []map[string]string{{"name": benchAnalyte, "unit": "mg/L"}}}
	if _, err := post(ctx, cl, svc.base+"/v1/methods", in.admin, method, http.StatusCreated, nil); err != nil {
		return in, err
	}
	for _, t := range []struct {
		name, scope string
		into        *string
	}{{"bench-instrument", "runs:write", &in.instrument}, {"bench-lims", "results:read", &in.lims}} {
		var out struct {
			Token string `json:"token"`
		}
		body := map[string]any{"name": t.name, "scopes": []string{t.scope}}
		if t.scope == "runs:write" { // bound to the instruments runRequest posts for
			body["instruments"] = append(benchInstruments(), largeInstrument)
		}
		if _, err := post(ctx, cl, svc.base+"/v1/tokens", in.admin, body, http.StatusCreated, &out); err != nil {
			return in, err
		}
		*t.into = out.Token
	}
	var created struct {
		Curves []struct {
			ID string `json:"id"`
		} `json:"curves"`
	}
	if _, err := post(ctx, cl, svc.base+"/v1/runs", in.instrument, runRequest(-1), http.StatusCreated, &created); err != nil {
		return in, err
	}
	if len(created.Curves) != 1 {
		return in, fmt.Errorf("the set-up run made %d curves, want 1", len(created.Curves))
	}
	in.curveID = created.Curves[0].ID
	return in, nil
}

// post sends v as JSON and decodes the answer into out (when not nil).
func post(ctx context.Context, cl *http.Client, url, token string, v any, want int, out any) ([]byte, error) {
	body, err := json.Marshal(v)
	if err != nil {
		return nil, err
	}
	b, err := call(ctx, cl, http.MethodPost, url, token, body, want)
	if err != nil || out == nil {
		return b, err
	}
	return b, json.Unmarshal(b, out)
}

func (h *harness) close() {
	if h.svc != nil {
		h.svc.stop()
	}
	if h.cluster != nil {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		if err := h.cluster.Stop(ctx); err != nil {
			fmt.Fprintln(h.log, "stop private PostgreSQL:", err)
		}
	}
	if h.dropDB != nil {
		h.dropDB()
	}
	if h.tmp != "" {
		_ = os.RemoveAll(h.tmp)
	}
}

func randomHex(n int) string {
	b := make([]byte, n)
	_, _ = rand.Read(b)
	return hex.EncodeToString(b)
}

// withDatabase returns connString (a URL or keyword/value string) naming db.
func withDatabase(connString, db string) (string, error) {
	if strings.HasPrefix(connString, "postgres://") || strings.HasPrefix(connString, "postgresql://") {
		u, err := url.Parse(connString)
		if err != nil {
			return "", fmt.Errorf("parse DATABASE_URL: %w", err)
		}
		u.Path = "/" + db
		return u.String(), nil
	}
	return connString + " dbname=" + db, nil
}
