// Package api is curvekeeper's HTTP layer: it owns every Echo and HTTP type.
package api

import (
	"context"
	"fmt"
	"log/slog"
	"net/http"
	"time"

	"github.com/labstack/echo/v4"
	"github.com/prometheus/client_golang/prometheus"

	"curvekeeper/api/curveplot"
	"curvekeeper/api/oapi"
	"curvekeeper/api/qaui"
	"curvekeeper/lab"
)

var _ oapi.StrictServerInterface = (*Server)(nil)

// Config holds what the HTTP layer needs to know.
type Config struct {
	BodyLimit      int64         // largest request body accepted, bytes
	RequestTimeout time.Duration // deadline of each request's context
	Version        string        // build version, reported in logs
	// RateLimit is each token's sustained request rate per second and
	// RateBurst its burst, counted in the memory of this process (per
	// replica). Zero means DefaultRateLimit and DefaultRateBurst; a
	// negative RateLimit turns limiting off.
	RateLimit float64
	RateBurst int
	// AuthFailureBurst is how many failed authentications one client
	// address may make at once before 429 (then one per 1/AuthFailureRate
	// seconds). Zero means the default, AuthFailureBurst; negative turns the
	// limit off.
	AuthFailureBurst int
	// Now is the clock the printable record states as its print time;
	// nil means time.Now.
	Now func() time.Time
}

// DefaultConfig returns the defaults used when a field is zero.
func DefaultConfig() Config {
	return Config{BodyLimit: 8 << 20, RequestTimeout: 15 * time.Second,
		RateLimit: DefaultRateLimit, RateBurst: DefaultRateBurst}
}

// Server is the HTTP service.
type Server struct {
	cfg     Config
	spec    *specValidator // the contract, for requests no fast path accepts
	lab     *lab.Service
	topo    lab.Topology // the database's replication (read-only mode, read replicas)
	ui      *qaui.Pages
	log     *slog.Logger
	echo    *echo.Echo
	metrics *metrics
	scopes  scopeTable
	curves  *curveCache
	budgets budgetCache   // each curve's budget context (lab.CurveBudgetContext)
	history historyCache  // the top-down estimate from the QC history per method and analyte
	limiter *tokenLimiter // nil when rate limiting is off
	// authFailures counts failed authentications per client address; nil
	// when that limit is off.
	authFailures *tokenLimiter
	// answerFault, when set (by tests only, api/fault_export_test.go), is
	// asked after each unit's answer is made, before the commit; an error
	// fails the unit as a failed encoding would.
	answerFault func(op string) error
}

// New builds the server and its routes.
func New(cfg Config, svc *lab.Service, log *slog.Logger) (*Server, error) {
	def := DefaultConfig()
	if cfg.BodyLimit <= 0 {
		cfg.BodyLimit = def.BodyLimit
	}
	if cfg.RequestTimeout <= 0 {
		cfg.RequestTimeout = def.RequestTimeout
	}
	if cfg.RateLimit == 0 {
		cfg.RateLimit = def.RateLimit
	}
	if cfg.RateBurst <= 0 {
		cfg.RateBurst = def.RateBurst
	}
	e := echo.New()
	e.HideBanner = true
	e.HidePort = true
	// The remote address is the peer's, never a client-supplied
	// X-Forwarded-For or X-Real-IP: those headers can be spoofed (see
	// GO-2026-6872 and GO-2026-6875, reported against Echo's defaults).
	e.IPExtractor = echo.ExtractIPDirect()
	doc, err := oapi.GetSwagger()
	if err != nil {
		return nil, fmt.Errorf("api: load the embedded spec: %w", err)
	}
	spec, err := newSpecValidator(doc)
	if err != nil {
		return nil, err
	}
	s := &Server{cfg: cfg, spec: spec, lab: svc, topo: svc.Topology(), log: log, echo: e, metrics: newMetrics(svc),
		scopes: newScopeTable(doc), curves: newCurveCache(1024),
		authFailures: newTokenLimiter(AuthFailureRate, AuthFailureBurst)}
	switch {
	case cfg.AuthFailureBurst < 0:
		s.authFailures = nil
	case cfg.AuthFailureBurst > 0:
		s.authFailures = newTokenLimiter(AuthFailureRate, cfg.AuthFailureBurst)
	}
	if cfg.RateLimit > 0 {
		s.limiter = newTokenLimiter(cfg.RateLimit, cfg.RateBurst)
	}
	e.HTTPErrorHandler = s.errorHandler
	e.Use(s.securityHeadersMiddleware, s.requestIDMiddleware, s.logMiddleware, s.metrics.middleware, s.recoverMiddleware, s.framingMiddleware,
		s.timeoutMiddleware, s.bodyLimitMiddleware, s.replicationMiddleware, s.authMiddleware, s.rateLimitMiddleware, acceptMiddleware, requestValidator(spec))
	s.metrics.registry.MustRegister(newReplicationCollector(s.topo))
	unit, idem := unitOps(doc)
	oapi.RegisterHandlers(e, oapi.NewStrictHandler(s, []oapi.StrictMiddlewareFunc{s.unitMiddleware(unit, idem)}))
	s.registerDecodedRoutes(e)
	s.ui = qaui.New(qaui.Deps{Lab: svc, Log: log, Reading: s.reading, Curve: s.freshCurve, Audit: s.curveAudit, Reviewed: s.curveChanged,
		Plot:       func(ctx context.Context, id string) ([]byte, error) { return s.plot(ctx, id, curveplot.FormatSVG) },
		TrendChart: trendChart, RequestID: requestID, Status: StatusOf,
		WithPrincipal: func(ctx context.Context, p lab.Principal) context.Context {
			return context.WithValue(ctx, principalKey{}, p)
		},
		ValidToken:      func(tok string) bool { _, ok := bearer("Bearer " + tok); return ok },
		AuthFailureWait: s.authFailureWait, AuthFailed: s.authFailed})
	s.ui.Register(e)
	return s, nil
}

// Handler returns the server as an http.Handler.
func (s *Server) Handler() http.Handler { return s.echo }

// Registry returns the Prometheus registry the server reports to.
func (s *Server) Registry() *prometheus.Registry { return s.metrics.registry }
