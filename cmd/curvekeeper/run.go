package main

import (
	"context"
	"crypto/tls"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"strings"
	"time"

	"curvekeeper/api"
	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/localpg"
)

// run is the whole program; main only wires the process to it. Tests call it
// with their own arguments, environment and writers, on port 0.
func run(ctx context.Context, args []string, getenv func(string) string, stdout, stderr io.Writer) error {
	cmd := "serve"
	if len(args) > 0 && !strings.HasPrefix(args[0], "-") {
		cmd, args = args[0], args[1:]
	}
	switch cmd {
	case "serve":
		cfg, _, err := parseConfig(cmd, args, getenv, stderr)
		if err != nil {
			return helpOK(err)
		}
		return serve(ctx, cfg, stdout, stderr)
	case "migrate":
		return migrateCmd(ctx, args, getenv, stdout, stderr)
	case "demo":
		return demoCmd(ctx, args, getenv, time.Now, stdout, stderr)
	case "help":
		// The same text as --help: the commands, then every flag.
		_, _, err := parseConfig("help", []string{"-h"}, getenv, stdout)
		return helpOK(err)
	default:
		return &usageError{fmt.Sprintf("unknown command %q (want serve, migrate, demo or help)", cmd)}
	}
}

const usageText = `usage:
  curvekeeper [serve] [flags]                       serve the HTTP API (default)
  curvekeeper migrate up|down [N]|force V|version   manage the database schema
  curvekeeper demo [flags]                          load the invented demo scenario, print tokens
  curvekeeper help                                  this text
Every command takes the flags below; each flag's environment variable is
named in parentheses, and a flag given wins over it.
`

func helpOK(err error) error {
	if errors.Is(err, flag.ErrHelp) {
		return nil
	}
	return err
}

func newLogger(cfg config, w io.Writer) *slog.Logger {
	var level slog.Level
	_ = level.UnmarshalText([]byte(cfg.LogLevel))
	return slog.New(slog.NewJSONHandler(w, &slog.HandlerOptions{Level: level}))
}

// database is an open database and whatever must be stopped after it.
type database struct {
	url      string           // the service's login
	ownerURL string           // migrations and the demo: the tables' owner; url when there is no separate owner
	cluster  *localpg.Cluster // nil when DATABASE_URL names a server
}

// openDatabase returns DATABASE_URL's server, or starts the private cluster.
// On the private cluster the service logs in as store.LoginRole and the
// cluster's superuser migrates; with DATABASE_URL, DATABASE_MIGRATE_URL (when
// set) migrates.
func openDatabase(ctx context.Context, cfg config, log *slog.Logger) (*database, error) {
	if cfg.DatabaseURL != "" {
		owner := cfg.MigrateURL
		if owner == "" {
			owner = cfg.DatabaseURL
		}
		return &database{url: cfg.DatabaseURL, ownerURL: owner}, nil
	}
	cl, err := localpg.Start(ctx, localpg.Options{DataDir: cfg.DataDir, Logger: log})
	if err != nil {
		return nil, err
	}
	login, err := store.WithUser(cl.URL(), store.LoginRole)
	if err != nil {
		_ = cl.Stop(context.WithoutCancel(ctx))
		return nil, err
	}
	return &database{url: login, ownerURL: cl.URL(), cluster: cl}, nil
}

// separateOwner reports whether migrations run as another role than the
// service's login.
func (d *database) separateOwner() bool { return d.ownerURL != d.url }

// grantLogin lets the service's login work as store.AppRole: on the private
// cluster it creates store.LoginRole; with DATABASE_MIGRATE_URL it grants
// AppRole to DATABASE_URL's user.
func (d *database) grantLogin(ctx context.Context) error {
	if d.cluster != nil {
		return store.EnsureLoginRole(ctx, d.ownerURL)
	}
	user, err := store.UserOf(d.url)
	if err != nil {
		return err
	}
	return store.GrantApp(ctx, d.ownerURL, user)
}

// openServing migrates through the owner's URL when it is separate, then
// opens the service's pool on its login (store.OpenApp), migrating through
// it otherwise. It warns when the login is a superuser or may become the
// tables' owner: an injected RESET ROLE would then regain those rights.
func openServing(ctx context.Context, cfg config, dbase *database, log *slog.Logger) (*store.DB, error) {
	connectCtx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	if dbase.separateOwner() {
		owner, err := store.Open(connectCtx, dbase.ownerURL)
		if err != nil {
			return nil, fmt.Errorf("cannot reach the database as the tables' owner (%s): %s", redactURL(dbase.ownerURL), oneLine(errors.Unwrap(err)))
		}
		err = prepareSchema(ctx, cfg, owner, dbase.ownerURL, log)
		if err == nil && !owner.ReadOnly() {
			err = dbase.grantLogin(ctx)
		}
		owner.Close()
		if err != nil {
			return nil, err
		}
	}
	db, err := store.OpenApp(connectCtx, dbase.url)
	if err != nil {
		return nil, fmt.Errorf("cannot reach the database (%s): %s", redactURL(dbase.url), oneLine(errors.Unwrap(err)))
	}
	if !dbase.separateOwner() {
		if err := prepareSchema(ctx, cfg, db, dbase.url, log); err != nil {
			db.Close()
			return nil, err
		}
	}
	p, err := db.LoginPrivilege(ctx)
	switch {
	case err != nil:
		log.Warn("could not read the login's privileges", "err", err)
	case p.Risky():
		log.Warn("the service logs in as a superuser or the tables' owner: an injected RESET ROLE would regain those rights; "+
			"set DATABASE_MIGRATE_URL to the owner and DATABASE_URL to a login role without them (README, Security)",
			"login", p.User, "superuser", p.Superuser, "owner", p.Owner)
	default:
		log.Info("database login", "login", p.User, "superuser", false, "owner", false)
	}
	return db, nil
}

func (d *database) close(log *slog.Logger) {
	if d.cluster == nil {
		return
	}
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	if err := d.cluster.Stop(ctx); err != nil {
		log.Error("stop private PostgreSQL", "error", err)
	}
}

// where says where the data lives, without a password.
func (d *database) where() string {
	if d.cluster != nil {
		return "private PostgreSQL in " + d.cluster.DataDir()
	}
	return "PostgreSQL at " + redactURL(d.url)
}

func serve(ctx context.Context, cfg config, stdout, stderr io.Writer) error {
	log := newLogger(cfg, stderr)
	started := time.Now()

	// Claim the port before anything slow, so "port in use" fails at once.
	ln, err := net.Listen("tcp", cfg.Listen)
	if err != nil {
		return fmt.Errorf("cannot listen on %s: %v", cfg.Listen, errors.Unwrap(err))
	}
	defer ln.Close()
	tlsCfg, err := loadTLS(cfg)
	if err != nil {
		return err
	}

	dbase, err := openDatabase(ctx, cfg, log)
	if err != nil {
		return err
	}
	defer dbase.close(log)

	db, err := openServing(ctx, cfg, dbase, log)
	if err != nil {
		return err
	}
	defer db.Close()
	connectCtx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	if len(cfg.ReadURLs) > 0 {
		if err := db.AttachReplicas(ctx, cfg.ReadURLs, store.ReplicaOptions{MaxLag: cfg.MaxReplicaLag}); err != nil {
			return err
		}
		if err := db.Refresh(connectCtx); err != nil {
			return fmt.Errorf("check the read replicas: %w", err)
		}
		for _, r := range db.Replicas() {
			log.Info("read replica", "replica", r.Name, "in_use", r.InUse, "reason", r.Reason)
		}
	}
	watchCtx, stopWatch := context.WithCancel(ctx)
	defer stopWatch()
	go db.Watch(watchCtx, cfg.CheckInterval, log)
	if cfg.BootstrapToken != "" && db.ReadOnly() {
		log.Warn("bootstrap token not stored: the database is a standby; an instance on the primary stores it")
	} else if cfg.BootstrapToken != "" {
		if _, _, err := db.EnsureToken(ctx, "bootstrap", cfg.BootstrapToken, []string{"admin"}); err != nil {
			return fmt.Errorf("store the bootstrap token: %w", err)
		}
	}

	if n, err := db.UnboundWriteTokens(ctx); err != nil {
		log.Warn("could not count the runs:write tokens without an instrument binding", "err", err)
	} else if n > 0 {
		log.Warn("live runs:write tokens are not bound to instruments: they may post and reach every instrument; issue bound tokens and revoke these",
			"unbound_runs_write_tokens", n)
	}

	rateLimit := cfg.RateLimit
	if rateLimit == 0 {
		rateLimit = -1 // off
	}
	svc := lab.NewService(db, lab.WithFutureSkew(cfg.ClockSkew))
	svc.People = lab.PeopleConfig{MaxFailedSignIns: cfg.MaxFailedSignIns, Zone: cfg.LabZone, SessionTTL: cfg.SessionTTL,
		RequireSignedApproval: cfg.RequireSignedApproval}
	srv, err := api.New(api.Config{BodyLimit: cfg.BodyLimit, RequestTimeout: cfg.RequestTimeout,
		RateLimit: rateLimit, RateBurst: cfg.RateBurst}, svc, log)
	if err != nil {
		return err
	}
	hs := &http.Server{
		Handler:           srv.Handler(),
		ReadHeaderTimeout: 10 * time.Second,
		ReadTimeout:       cfg.RequestTimeout + 15*time.Second,
		WriteTimeout:      cfg.RequestTimeout + 15*time.Second,
		IdleTimeout:       120 * time.Second,
		ErrorLog:          slog.NewLogLogger(log.Handler(), slog.LevelWarn),
		ConnContext:       api.FramingContext, // with FramingGuard below: refuse two framings
	}
	scheme := "http"
	if tlsCfg != nil {
		hs.TLSConfig = tlsCfg
		scheme = "https"
	}
	if cfg.PprofListen != "" {
		closePprof, err := startPprof(cfg.PprofListen, stdout, log)
		if err != nil {
			return err
		}
		defer closePprof()
	}
	errc := make(chan error, 1)
	go func() {
		if scheme == "https" {
			errc <- hs.ServeTLS(ln, "", "")
			return
		}
		errc <- hs.Serve(api.FramingGuard(ln))
	}()

	addr := ln.Addr().String()
	fmt.Fprintf(stdout, "curvekeeper: listening on %s://%s\n", scheme, addr)
	fmt.Fprintf(stdout, "curvekeeper: data in %s\n", dbase.where())
	log.Info("ready", "listen", addr, "database", dbase.where(), "read_only", db.ReadOnly(), "replicas", len(cfg.ReadURLs), "startup_ms", time.Since(started).Milliseconds())

	select {
	case err := <-errc:
		return fmt.Errorf("http server: %w", err)
	case <-ctx.Done():
	}
	log.Info("shutting down", "deadline", cfg.ShutdownTimeout.String())
	shutCtx, cancelShut := context.WithTimeout(context.Background(), cfg.ShutdownTimeout)
	defer cancelShut()
	if err := hs.Shutdown(shutCtx); err != nil {
		log.Error("shutdown deadline passed; closing connections", "error", err)
		_ = hs.Close()
	}
	fmt.Fprintln(stdout, "curvekeeper: stopped")
	return nil
}

// prepareSchema migrates the database, or, when it is a standby in recovery
// (which refuses writes), skips the migrations and serves reads only; either
// way the schema must then be the one this binary needs. A standby's schema
// comes from its primary: when it is behind, the primary is migrated first
// (by an instance of this version started on it, or `curvekeeper migrate
// up`), and the standby follows by replaying it.
func prepareSchema(ctx context.Context, cfg config, db *store.DB, url string, log *slog.Logger) error {
	standby, err := db.InRecovery(ctx)
	if err != nil {
		return fmt.Errorf("ask the database whether it is a standby: %w", err)
	}
	if !standby {
		if err := store.MigrateUp(ctx, url, cfg.MigrateLockWait); err != nil {
			return err
		}
		return db.CheckSchema(ctx)
	}
	log.Warn("the database is a standby in recovery: migrations skipped, serving reads only (writes answer 503) until it is promoted")
	err = db.CheckSchema(ctx)
	var se *store.SchemaError
	if errors.As(err, &se) && !se.Dirty && se.Version < se.Latest {
		return fmt.Errorf("the standby's schema is at version %d but this curvekeeper needs %d, and a standby cannot be migrated: "+
			"migrate the primary (start this version on it, or run `curvekeeper migrate up` against it), let the standby replay it, then start again", se.Version, se.Latest)
	}
	return err
}

// loadTLS reads --tls-cert and --tls-key; nil when neither is given.
func loadTLS(cfg config) (*tls.Config, error) {
	if cfg.TLSCert == "" {
		return nil, nil
	}
	cert, err := tls.LoadX509KeyPair(cfg.TLSCert, cfg.TLSKey)
	if err != nil {
		return nil, fmt.Errorf("load --tls-cert %s and --tls-key %s: %w", cfg.TLSCert, cfg.TLSKey, err)
	}
	return &tls.Config{MinVersion: tls.VersionTLS12, Certificates: []tls.Certificate{cert}}, nil
}

// oneLine folds a multi-line error (pgconn lists each address tried on its
// own line) into one line, dropping repeated parts.
func oneLine(err error) string {
	if err == nil {
		return ""
	}
	var parts []string
	seen := map[string]bool{}
	for _, p := range strings.Split(err.Error(), "\n") {
		p = strings.TrimSpace(p)
		if p != "" && !seen[p] {
			seen[p] = true
			parts = append(parts, p)
		}
	}
	return strings.Join(parts, " ")
}

// redactURL names where a database connection string points, without any
// password (store.DescribeURL).
func redactURL(u string) string { return store.DescribeURL(u) }
