package api

import (
	"context"
	"net/http"
	"slices"
	"strings"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/labstack/echo/v4"

	"curvekeeper/lab"
)

type principalKey struct{}

// curveStatusKey carries the review status of the curve a request names,
// read with its token (see authMiddleware), so the handler need not read it
// again.
type curveStatusKey struct{}

type curveStatus struct{ id, status string }

// prefetchedStatus returns the status authMiddleware read for curve id.
func prefetchedStatus(ctx context.Context, id string) (string, bool) {
	cs, ok := ctx.Value(curveStatusKey{}).(curveStatus)
	if !ok || cs.id != id {
		return "", false
	}
	return cs.status, true
}

func principalFrom(ctx context.Context) (lab.Principal, bool) {
	p, ok := ctx.Value(principalKey{}).(lab.Principal)
	return p, ok
}

// scopeTable maps "METHOD echo-path" to the scopes of which a route needs any
// one, read from
// the x-required-scopes extension of each operation in the spec, so that the
// contract and the enforcement are one table.
type scopeTable map[string][]string

func newScopeTable(doc *openapi3.T) scopeTable {
	t := scopeTable{}
	for path, item := range doc.Paths.Map() {
		for method, op := range item.Operations() {
			raw, ok := op.Extensions["x-required-scopes"]
			if !ok {
				continue
			}
			var scopes []string
			if list, ok := raw.([]any); ok {
				for _, s := range list {
					if str, ok := s.(string); ok {
						scopes = append(scopes, str)
					}
				}
			}
			t[method+" "+echoPath(path)] = scopes
		}
	}
	return t
}

// echoPath turns /v1/curves/{id} into Echo's /v1/curves/:id.
func echoPath(p string) string {
	var b strings.Builder
	for i := 0; i < len(p); i++ {
		switch p[i] {
		case '{':
			b.WriteByte(':')
		case '}':
		default:
			b.WriteByte(p[i])
		}
	}
	return b.String()
}

// authMiddleware authenticates every /v1 request by its bearer token and
// checks the route's scopes: 401 without a valid token, 403 without the scope.
func (s *Server) authMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		if !strings.HasPrefix(c.Request().URL.Path, "/v1/") {
			return next(c)
		}
		if secs := s.authFailureWait(c); secs > 0 {
			return newProblem(http.StatusTooManyRequests, tooManyFailures(secs))
		}
		secret, ok := bearer(c.Request().Header.Get(echo.HeaderAuthorization))
		if !ok {
			c.Response().Header().Set("WWW-Authenticate", `Bearer realm="curvekeeper"`)
			return newProblem(http.StatusUnauthorized, "send Authorization: Bearer <token>")
		}
		var (
			p      lab.Principal
			status string
			err    error
		)
		if c.Path() == predictionRoute && c.Request().Method == http.MethodPost {
			// One round trip for the token and the curve's status, which
			// the handler needs too: still a fresh read of the token on
			// every request, so a revocation holds from the next request
			// on, on every replica.
			p, status, err = s.lab.LookupTokenAndCurveStatus(c.Request().Context(), secret, c.Param("id"))
		} else {
			p, err = s.lab.LookupToken(c.Request().Context(), secret)
		}
		if err != nil {
			if lab.KindOf(err) == lab.KindNotFound {
				s.authFailed(c)
				c.Response().Header().Set("WWW-Authenticate", `Bearer realm="curvekeeper", error="invalid_token"`)
				return newProblem(http.StatusUnauthorized, "the token is unknown or revoked")
			}
			return err
		}
		need, known := s.scopes[c.Request().Method+" "+c.Path()]
		if !known && c.Path() != "" && c.Path() != "/*" {
			need = []string{lab.ScopeAdmin} // a route the spec gives no scopes is admin-only
		}
		if len(need) > 0 && !slices.ContainsFunc(need, p.Has) {
			return newProblem(http.StatusForbidden, "this route needs one of the scopes "+strings.Join(need, ", "))
		}
		if err := s.checkReach(c, p); err != nil {
			return err
		}
		req := c.Request()
		ctx := context.WithValue(req.Context(), principalKey{}, p)
		if status != "" {
			ctx = context.WithValue(ctx, curveStatusKey{}, curveStatus{id: c.Param("id"), status: status})
		}
		c.SetRequest(req.WithContext(ctx))
		return next(c)
	}
}

// bearer extracts the token of an "Authorization: Bearer <token>" header.
func bearer(h string) (string, bool) {
	const prefix = "bearer "
	if len(h) <= len(prefix) || !strings.EqualFold(h[:len(prefix)], prefix) {
		return "", false
	}
	tok := strings.TrimSpace(h[len(prefix):])
	if tok == "" || len(tok) > 256 || strings.ContainsAny(tok, " \t\r\n") {
		return "", false
	}
	return tok, true
}

// checkReach applies a bound token's instrument binding (lab.CheckReach) to
// what the route names: an instrument in its path, or a run or a curve by
// id. A run posted with a body names its instrument there, and lab.Ingest
// checks it.
func (s *Server) checkReach(c echo.Context, p lab.Principal) error {
	if !p.Bound() {
		return nil
	}
	path, ctx := c.Path(), c.Request().Context()
	switch {
	case strings.Contains(path, "/:instrument"):
		return s.lab.CheckReach(ctx, p, lab.ReachInstrument, c.Param("instrument"))
	case strings.HasPrefix(path, "/v1/runs/:id"):
		return s.lab.CheckReach(ctx, p, lab.ReachRun, c.Param("id"))
	case strings.HasPrefix(path, "/v1/curves/:id"):
		return s.lab.CheckReach(ctx, p, lab.ReachCurve, c.Param("id"))
	}
	return nil
}
