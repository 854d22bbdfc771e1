package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"curvekeeper/lab"
)

// config is every setting of the service, parsed once from flags and
// CURVEKEEPER_* environment variables (flags win) and passed down as a value.
type config struct {
	Listen      string
	DatabaseURL string
	// MigrateURL is the tables' owner (DATABASE_MIGRATE_URL): migrations
	// run through it and the service logs in through DatabaseURL, a role
	// that is neither superuser nor owner. Empty: DatabaseURL does both.
	MigrateURL      string
	DataDir         string
	BodyLimit       int64
	RequestTimeout  time.Duration
	ShutdownTimeout time.Duration
	MigrateLockWait time.Duration
	LogLevel        string
	BootstrapToken  string
	RateLimit       float64 // requests per second per token, per replica; 0 turns limiting off
	RateBurst       int
	TLSCert         string // PEM certificate chain; with TLSKey the service speaks HTTPS only
	TLSKey          string
	PprofListen     string // "" (default): no profiling listener
	// ReadURLs are read replicas (hot standbys of DatabaseURL's primary)
	// that lag-tolerant reads may use; empty: every read on DatabaseURL.
	ReadURLs      []string
	MaxReplicaLag time.Duration // above it a replica gets no reads
	CheckInterval time.Duration // how often recovery and replica lag are checked
	// LabZone is the lab's time zone, shown beside UTC on signatures and
	// printed records; MaxFailedSignIns wrong passwords in a row lock a
	// person's account.
	LabZone          *time.Location
	MaxFailedSignIns int
	// SessionTTL is how long a session of the QA pages lasts (at most
	// lab.MaxSessionTTL).
	SessionTTL time.Duration
	// RequireSignedApproval refuses a token's unsigned review on every
	// method (lab.PeopleConfig.RequireSignedApproval).
	RequireSignedApproval bool
	// ClockSkew is how far ahead of its receipt a claimed measurement time
	// may lie (lab.DefaultFutureSkew unless set).
	ClockSkew time.Duration
}

// usageError is a bad command line or setting; it exits with status 2.
type usageError struct{ msg string }

func (e *usageError) Error() string { return e.msg }

func exitCode(err error) int {
	var ue *usageError
	if errors.As(err, &ue) {
		return 2
	}
	return 1
}

// parseConfig reads the flags of a subcommand over the environment.
func parseConfig(name string, args []string, getenv func(string) string, stderr io.Writer) (config, []string, error) {
	env := func(key, def string) string {
		if v := getenv(key); v != "" {
			return v
		}
		return def
	}
	var cfg config
	fs := flag.NewFlagSet("curvekeeper "+name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		fmt.Fprint(fs.Output(), usageText+"\nflags:\n")
		fs.PrintDefaults()
	}
	fs.StringVar(&cfg.Listen, "listen", env("CURVEKEEPER_LISTEN", "127.0.0.1:8080"), "address to listen on (CURVEKEEPER_LISTEN)")
	fs.StringVar(&cfg.DatabaseURL, "database-url", env("DATABASE_URL", ""), "PostgreSQL URL; empty starts a private cluster in --data-dir (DATABASE_URL)")
	fs.StringVar(&cfg.MigrateURL, "database-migrate-url", env("DATABASE_MIGRATE_URL", ""), "PostgreSQL URL of the tables' owner, for migrations; the service then logs in through --database-url, a role without superuser or ownership (DATABASE_MIGRATE_URL)")
	fs.StringVar(&cfg.DataDir, "data-dir", env("CURVEKEEPER_DATA_DIR", "./curvekeeper-data"), "folder of the private PostgreSQL cluster (CURVEKEEPER_DATA_DIR)")
	bodyLimit := fs.String("body-limit", env("CURVEKEEPER_BODY_LIMIT", "8388608"), "largest request body in bytes (CURVEKEEPER_BODY_LIMIT)")
	reqTimeout := fs.String("request-timeout", env("CURVEKEEPER_REQUEST_TIMEOUT", "15s"), "deadline of each request (CURVEKEEPER_REQUEST_TIMEOUT)")
	shutTimeout := fs.String("shutdown-timeout", env("CURVEKEEPER_SHUTDOWN_TIMEOUT", "20s"), "time in-flight requests get on SIGTERM (CURVEKEEPER_SHUTDOWN_TIMEOUT)")
	lockWait := fs.String("migrate-lock-timeout", env("CURVEKEEPER_MIGRATE_LOCK_TIMEOUT", "30s"), "longest wait for the migration lock (CURVEKEEPER_MIGRATE_LOCK_TIMEOUT)")
	rateLimit := fs.String("rate-limit", env("CURVEKEEPER_RATE_LIMIT", "50"), "requests per second each token may send, counted per replica; 0 turns limiting off (CURVEKEEPER_RATE_LIMIT)")
	rateBurst := fs.String("rate-burst", env("CURVEKEEPER_RATE_BURST", "200"), "requests a token may send at once above the rate (CURVEKEEPER_RATE_BURST)")
	fs.StringVar(&cfg.TLSCert, "tls-cert", env("CURVEKEEPER_TLS_CERT", ""), "PEM certificate file; with --tls-key serve HTTPS (CURVEKEEPER_TLS_CERT)")
	fs.StringVar(&cfg.TLSKey, "tls-key", env("CURVEKEEPER_TLS_KEY", ""), "PEM private key file of --tls-cert (CURVEKEEPER_TLS_KEY)")
	fs.StringVar(&cfg.LogLevel, "log-level", env("CURVEKEEPER_LOG_LEVEL", "info"), "debug, info, warn or error (CURVEKEEPER_LOG_LEVEL)")
	fs.StringVar(&cfg.PprofListen, "pprof-listen", env("CURVEKEEPER_PPROF_LISTEN", ""), "loopback host:port for /debug/pprof; empty is off (CURVEKEEPER_PPROF_LISTEN)")
	readURLs := fs.String("database-read-url", env("DATABASE_READ_URL", ""), "comma-separated PostgreSQL URLs of read replicas (hot standbys of the primary) for lag-tolerant reads (DATABASE_READ_URL)")
	maxLag := fs.String("replica-max-lag", env("CURVEKEEPER_REPLICA_MAX_LAG", "10s"), "a replica lagging more gets no reads (CURVEKEEPER_REPLICA_MAX_LAG)")
	labZone := fs.String("lab-time-zone", env("CURVEKEEPER_LAB_TIME_ZONE", "UTC"), "the lab's IANA time zone, shown beside UTC on signatures and printed records (CURVEKEEPER_LAB_TIME_ZONE)")
	maxFailed := fs.Int("max-failed-sign-ins", 0, "wrong passwords in a row that lock a person's account; 0 means CURVEKEEPER_MAX_FAILED_SIGN_INS or 5")
	checkEvery := fs.String("replica-check-interval", env("CURVEKEEPER_REPLICA_CHECK_INTERVAL", "1s"), "how often the service checks whether its database is a standby and how far replicas lag (CURVEKEEPER_REPLICA_CHECK_INTERVAL)")
	clockSkew := fs.String("clock-skew", env("CURVEKEEPER_CLOCK_SKEW", "24h"), "how far ahead of its receipt a run's, sample's or verification's time may lie (CURVEKEEPER_CLOCK_SKEW)")
	fs.BoolVar(&cfg.RequireSignedApproval, "require-signed-approval", env("CURVEKEEPER_REQUIRE_SIGNED_APPROVAL", "") == "true",
		"approve or reject curves only by a person's electronic signature on every method: POST /v1/curves/{id}/review is refused (CURVEKEEPER_REQUIRE_SIGNED_APPROVAL=true)")
	sessionTTL := fs.String("session-length", env("CURVEKEEPER_SESSION_LENGTH", "8h"), "how long a sign-in to the QA pages lasts, at most 24h (CURVEKEEPER_SESSION_LENGTH)")
	cfg.BootstrapToken = getenv("CURVEKEEPER_BOOTSTRAP_TOKEN")
	// Flags may come before or after positional arguments ("migrate down 1
	// --database-url …"): the flag package stops at the first positional one,
	// so parse on after each.
	var positional []string
	for {
		if err := fs.Parse(args); err != nil {
			if errors.Is(err, flag.ErrHelp) {
				return cfg, nil, err
			}
			return cfg, nil, &usageError{err.Error()}
		}
		if fs.NArg() == 0 {
			break
		}
		positional = append(positional, fs.Arg(0))
		args = fs.Args()[1:]
	}
	var err error
	if cfg.BodyLimit, err = strconv.ParseInt(*bodyLimit, 10, 64); err != nil || cfg.BodyLimit < 1024 {
		return cfg, nil, &usageError{fmt.Sprintf("--body-limit %q: want a whole number of bytes ≥ 1024", *bodyLimit)}
	}
	if cfg.RateLimit, err = strconv.ParseFloat(*rateLimit, 64); err != nil || cfg.RateLimit < 0 || math.IsInf(cfg.RateLimit, 0) || math.IsNaN(cfg.RateLimit) {
		return cfg, nil, &usageError{fmt.Sprintf("--rate-limit %q: want requests per second ≥ 0 (0 turns limiting off)", *rateLimit)}
	}
	if cfg.RateBurst, err = strconv.Atoi(*rateBurst); err != nil || cfg.RateBurst < 1 {
		return cfg, nil, &usageError{fmt.Sprintf("--rate-burst %q: want a whole number ≥ 1", *rateBurst)}
	}
	if (cfg.TLSCert == "") != (cfg.TLSKey == "") {
		return cfg, nil, &usageError{"--tls-cert and --tls-key go together: give both or neither"}
	}
	durations := []struct {
		name string
		in   string
		out  *time.Duration
	}{
		{"--request-timeout", *reqTimeout, &cfg.RequestTimeout},
		{"--shutdown-timeout", *shutTimeout, &cfg.ShutdownTimeout},
		{"--migrate-lock-timeout", *lockWait, &cfg.MigrateLockWait},
		{"--replica-max-lag", *maxLag, &cfg.MaxReplicaLag},
		{"--replica-check-interval", *checkEvery, &cfg.CheckInterval},
		{"--clock-skew", *clockSkew, &cfg.ClockSkew},
		{"--session-length", *sessionTTL, &cfg.SessionTTL},
	}
	for _, d := range durations {
		v, err := time.ParseDuration(d.in)
		if err != nil || v <= 0 {
			return cfg, nil, &usageError{fmt.Sprintf("%s %q: want a positive duration such as 15s", d.name, d.in)}
		}
		*d.out = v
	}
	for _, u := range strings.Split(*readURLs, ",") {
		if u = strings.TrimSpace(u); u != "" {
			cfg.ReadURLs = append(cfg.ReadURLs, u)
		}
	}
	if cfg.SessionTTL > lab.MaxSessionTTL {
		return cfg, nil, &usageError{fmt.Sprintf("--session-length %s: at most %s", cfg.SessionTTL, lab.MaxSessionTTL)}
	}
	if len(cfg.ReadURLs) > 0 && cfg.DatabaseURL == "" {
		return cfg, nil, &usageError{"--database-read-url needs --database-url: read replicas are standbys of a primary server, not of the private cluster"}
	}
	if cfg.MigrateURL != "" && cfg.DatabaseURL == "" {
		return cfg, nil, &usageError{"--database-migrate-url needs --database-url: the private cluster makes its own login role"}
	}
	if len(cfg.ReadURLs) > 64 {
		return cfg, nil, &usageError{"--database-read-url: at most 64 replicas"}
	}
	if err := checkPprofListen(cfg.PprofListen); err != nil {
		return cfg, nil, err
	}
	switch strings.ToLower(cfg.LogLevel) {
	case "debug", "info", "warn", "error":
	default:
		return cfg, nil, &usageError{fmt.Sprintf("--log-level %q: want debug, info, warn or error", cfg.LogLevel)}
	}
	zone, err := time.LoadLocation(*labZone)
	if err != nil || *labZone == "" || *labZone == "Local" {
		return cfg, nil, &usageError{fmt.Sprintf("--lab-time-zone %q: want an IANA zone name such as Europe/Vienna or UTC", *labZone)}
	}
	cfg.LabZone = zone
	cfg.MaxFailedSignIns = *maxFailed
	if cfg.MaxFailedSignIns == 0 {
		if v := getenv("CURVEKEEPER_MAX_FAILED_SIGN_INS"); v != "" {
			if cfg.MaxFailedSignIns, err = strconv.Atoi(v); err != nil {
				cfg.MaxFailedSignIns = -1
			}
		} else {
			cfg.MaxFailedSignIns = lab.DefaultMaxFailedSignIns
		}
	}
	if cfg.MaxFailedSignIns < 1 || cfg.MaxFailedSignIns > 100 {
		return cfg, nil, &usageError{"--max-failed-sign-ins: want a whole number from 1 to 100"}
	}
	return cfg, positional, nil
}
