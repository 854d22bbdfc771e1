// Package qaui is the QA pages: server-rendered HTML under /ui/ for people
// who review curves and watch trends, beside the REST handlers of package
// api, which builds it with the few things it shares (Deps). It owns no
// response header: api's security middleware sets those for /ui/ too.
//
// Every fit and reported value shown is an aid: local accreditation,
// regulation and the laboratory's SOP come first, and a qualified person
// reviews the results.
package qaui

import (
	"context"
	"log/slog"
	"strings"

	"github.com/labstack/echo/v4"

	"curvekeeper/lab"
)

// Deps is what the pages take from the service around them.
type Deps struct {
	Lab *lab.Service
	Log *slog.Logger
	// Reading returns the service whose reads tolerate a read replica's
	// lag (the api's reading): the curve list and the trends read from it.
	// Sessions, reviews and signatures use Lab.
	Reading func(ctx context.Context) *lab.Service
	// Curve returns curve id with its current review status (in a GET,
	// as a read replica has it).
	Curve func(ctx context.Context, id string) (*lab.Curve, error)
	// Audit returns curve id's audit trail (in a GET, from a read replica).
	Audit func(ctx context.Context, id string) ([]lab.AuditEvent, error)
	// Reviewed says that curve id was reviewed (its cached copy is stale).
	Reviewed func(id string)
	// Plot draws curve id as SVG.
	Plot func(ctx context.Context, id string) ([]byte, error)
	// TrendChart draws a trend as SVG.
	TrendChart func(t *lab.Trend) ([]byte, error)
	// RequestID names the request in logs and error pages.
	RequestID func(c echo.Context) string
	// Status is the HTTP status of an error (the api's one table).
	Status func(err error) int
	// WithPrincipal puts the signed-in caller on a request's context, where
	// the api's handlers and rate limits find it.
	WithPrincipal func(ctx context.Context, p lab.Principal) context.Context
	// ValidToken reports whether s has the form of an API token secret.
	ValidToken func(s string) bool
	// AuthFailureWait is how many seconds the client must wait after too
	// many failed sign-ins (0: none); AuthFailed counts one.
	AuthFailureWait func(c echo.Context) int
	AuthFailed      func(c echo.Context)
}

// Pages serves the QA pages.
type Pages struct{ Deps }

// New returns the pages over d.
func New(d Deps) *Pages { return &Pages{Deps: d} }

// IsPath reports whether path belongs to the QA pages under /ui/, which
// answer with pages, not problems.
func IsPath(path string) bool { return path == "/ui" || strings.HasPrefix(path, "/ui/") }
