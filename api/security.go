package api

import (
	"math"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/labstack/echo/v4"
	"golang.org/x/time/rate"

	"curvekeeper/api/qaui"
	"curvekeeper/lab"
)

// securityHeadersMiddleware sets the headers every response carries,
// before anything else runs, so that errors, 404s and problems get them
// too; it is the one place that sets them (the QA pages set none of their
// own). Strict-Transport-Security is sent only over TLS, as RFC 6797 §7.2
// asks.
func (s *Server) securityHeadersMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		h := c.Response().Header()
		for _, kv := range securityHeaders(c.Request().URL.Path) {
			h.Set(kv[0], kv[1])
		}
		if c.Request().TLS != nil {
			h.Set("Strict-Transport-Security", "max-age=31536000")
		}
		return next(c)
	}
}

// Security headers by kind of response. Every response is kept out of
// frames and content sniffing. Responses under /v1 are never stored by
// caches: they carry tokens' results. The QA pages allow no script at all
// and only their own style sheet and images, and are not stored either;
// their style sheet may be cached for an hour.
var (
	restHeaders = [][2]string{
		{"X-Content-Type-Options", "nosniff"},
		{"Referrer-Policy", "no-referrer"},
		{"X-Frame-Options", "DENY"},
		{"Content-Security-Policy", "frame-ancestors 'none'"},
	}
	v1Headers     = append(restHeaders[:len(restHeaders):len(restHeaders)], [2]string{"Cache-Control", "no-store"})
	uiPageHeaders = [][2]string{
		{"X-Content-Type-Options", "nosniff"},
		{"Referrer-Policy", "same-origin"},
		{"X-Frame-Options", "DENY"},
		{"Content-Security-Policy", "default-src 'none'; style-src 'self'; img-src 'self'; form-action 'self'; frame-ancestors 'none'; base-uri 'none'"},
		{"Cache-Control", "no-store"},
	}
	uiStyleHeaders = append(uiPageHeaders[:len(uiPageHeaders)-1:len(uiPageHeaders)-1], [2]string{"Cache-Control", "public, max-age=3600"})
)

// securityHeaders returns the security headers of a response to path.
func securityHeaders(path string) [][2]string {
	switch {
	case strings.HasPrefix(path, "/v1/"):
		return v1Headers
	case path == qaui.StylePath:
		return uiStyleHeaders
	case qaui.IsPath(path):
		return uiPageHeaders
	}
	return restHeaders
}

// DefaultRateLimit and DefaultRateBurst are the per-token request rate
// (requests per second, sustained) and burst when Config leaves them zero:
// generous, so that instruments posting runs and benchmarks are not
// throttled, while a runaway client is.
const (
	DefaultRateLimit = 50.0
	DefaultRateBurst = 200
)

// ReaderRateFactor multiplies the rate and the burst of a machine reader: a
// token whose only scope is results:read (a LIMS reading results and curves
// back). Such a client reads many records in a row after a batch (a LIMS
// reading 350 runs back at once met 429s under the instruments' limit), and
// reads are cheap next to ingest; instruments, reviewers and administrators
// keep the base limit.
const ReaderRateFactor = 5

// isMachineReader reports whether scopes hold results:read and nothing else.
func isMachineReader(scopes []string) bool {
	return len(scopes) == 1 && scopes[0] == lab.ScopeResultsRead
}

// tokenLimiter holds one token bucket per API token. It lives in the
// memory of one process: with several replicas each applies its own limit,
// so a client spread over n replicas may reach n times the rate.
type tokenLimiter struct {
	limit rate.Limit
	burst int

	mu      sync.Mutex
	buckets map[string]*rate.Limiter
	sweepAt int // sweep full buckets when the map grows past this size
}

func newTokenLimiter(perSecond float64, burst int) *tokenLimiter {
	return &tokenLimiter{limit: rate.Limit(perSecond), burst: burst,
		buckets: map[string]*rate.Limiter{}, sweepAt: 1024}
}

// allow takes one request from the token's bucket. When the bucket is
// empty it returns false and how long until a request would be admitted.
func (l *tokenLimiter) allow(tokenID string, now time.Time) (bool, time.Duration) {
	ok, wait, _ := l.allowScaled(tokenID, 1, now)
	return ok, wait
}

// quota is a bucket's state after a decision, as the RateLimit header
// fields of draft-ietf-httpapi-ratelimit-headers-06 state it.
type quota struct {
	limit     int     // the bucket's size (the burst)
	remaining int     // whole requests left in the bucket
	reset     int     // seconds, rounded up, until the bucket is full
	window    int     // seconds, rounded up, the rate takes to fill an empty bucket
	perSecond float64 // the refill rate
}

// setHeaders writes q as RateLimit-Limit, -Remaining, -Reset and -Policy.
func (q quota) setHeaders(h http.Header) {
	h.Set("RateLimit-Limit", strconv.Itoa(q.limit))
	h.Set("RateLimit-Remaining", strconv.Itoa(q.remaining))
	h.Set("RateLimit-Reset", strconv.Itoa(q.reset))
	h.Set("RateLimit-Policy", strconv.Itoa(q.limit)+";w="+strconv.Itoa(q.window))
}

// allowScaled is allow for a key whose bucket, when it is created, gets
// scale times the limiter's rate and burst. It also returns the bucket's
// quota after the decision.
func (l *tokenLimiter) allowScaled(tokenID string, scale int, now time.Time) (bool, time.Duration, quota) {
	l.mu.Lock()
	defer l.mu.Unlock()
	b, ok := l.buckets[tokenID]
	if !ok {
		if len(l.buckets) >= l.sweepAt {
			l.sweep(now)
		}
		b = rate.NewLimiter(l.limit*rate.Limit(scale), l.burst*scale)
		l.buckets[tokenID] = b
	}
	allowed, wait := true, time.Duration(0)
	r := b.ReserveN(now, 1)
	switch {
	case !r.OK():
		allowed, wait = false, time.Second
	case r.DelayFrom(now) > 0:
		wait = r.DelayFrom(now)
		r.CancelAt(now) // a refused request takes nothing from the bucket
		allowed = false
	}
	return allowed, wait, bucketQuota(b, now)
}

// bucketQuota reads b's state at now.
func bucketQuota(b *rate.Limiter, now time.Time) quota {
	perSecond, burst := float64(b.Limit()), b.Burst()
	tokens := max(0, b.TokensAt(now))
	return quota{limit: burst, remaining: int(math.Floor(tokens)), perSecond: perSecond,
		reset:  int(math.Ceil((float64(burst) - tokens) / perSecond)),
		window: int(math.Ceil(float64(burst) / perSecond))}
}

// sweep drops the buckets that have refilled completely: a fresh bucket is
// full too, so forgetting them changes no decision and bounds the memory.
func (l *tokenLimiter) sweep(now time.Time) {
	for id, b := range l.buckets {
		if b.TokensAt(now) >= float64(b.Burst()) {
			delete(l.buckets, id)
		}
	}
	l.sweepAt = max(1024, 2*len(l.buckets))
}

// rateLimitMiddleware refuses a token's requests past its rate with 429 and
// a Retry-After header in whole seconds (at least 1), and states the token's
// quota on every answer, admitted or not, in the RateLimit header fields of
// draft-ietf-httpapi-ratelimit-headers-06 (RateLimit-Limit, -Remaining,
// -Reset, -Policy), so a client learns its limit before a 429. It runs after
// authMiddleware, so requests without a valid token are not counted.
func (s *Server) rateLimitMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		p, ok := principalFrom(c.Request().Context())
		if !ok || s.limiter == nil {
			return next(c)
		}
		scale := 1
		if isMachineReader(p.Scopes) {
			scale = ReaderRateFactor
		}
		key := p.TokenID
		if p.IsPerson() { // a person's QA-page session: one bucket per person
			key = p.Actor()
		}
		allowed, wait, q := s.limiter.allowScaled(key, scale, s.lab.Now())
		q.setHeaders(c.Response().Header())
		if allowed {
			return next(c)
		}
		secs := max(1, int(math.Ceil(wait.Seconds())))
		c.Response().Header().Set("Retry-After", strconv.Itoa(secs))
		return newProblem(http.StatusTooManyRequests, "this token sends requests faster than "+
			strconv.FormatFloat(q.perSecond, 'g', -1, 64)+" per second (burst "+strconv.Itoa(q.limit)+
			"); retry after "+strconv.Itoa(secs)+" s")
	}
}

// Failed authentications (an unknown or revoked bearer token, a refused UI
// sign-in) are limited per client address: AuthFailureBurst at once, then one
// every 1/AuthFailureRate seconds. Past that the address gets 429 with
// Retry-After before its token is even looked up, so guessing tokens costs the
// guesser time and the database nothing. A client with a valid token is never
// counted. The address is the peer's (Echo's IPExtractor is ExtractIPDirect):
// behind a proxy every client shares the proxy's address, so set the proxy's
// own limits there.
const (
	AuthFailureRate  = 1.0 / 6 // per second: 10 a minute sustained
	AuthFailureBurst = 20
)

// blocked reports whether key's bucket is empty now, and for how long.
// Unlike allow it takes nothing.
func (l *tokenLimiter) blocked(key string, now time.Time) (bool, time.Duration) {
	l.mu.Lock()
	defer l.mu.Unlock()
	b, ok := l.buckets[key]
	if !ok {
		return false, 0
	}
	if tokens := b.TokensAt(now); tokens < 1 {
		return true, time.Duration((1 - tokens) / float64(l.limit) * float64(time.Second))
	}
	return false, 0
}

// authFailureWait returns, when the client's address has failed to
// authenticate too often, the whole seconds (at least 1) until it may try
// again, and sets Retry-After to it; 0 otherwise.
func (s *Server) authFailureWait(c echo.Context) int {
	if s.authFailures == nil {
		return 0
	}
	blocked, wait := s.authFailures.blocked(c.RealIP(), s.lab.Now())
	if !blocked {
		return 0
	}
	secs := max(1, int(math.Ceil(wait.Seconds())))
	c.Response().Header().Set("Retry-After", strconv.Itoa(secs))
	return secs
}

// tooManyFailures is the text of the 429 that authFailureWait implies.
func tooManyFailures(secs int) string {
	return "too many failed authentications from this address; retry in " + strconv.Itoa(secs) + " s"
}

// authFailed counts one failed authentication of the client's address.
func (s *Server) authFailed(c echo.Context) {
	if s.authFailures != nil {
		s.authFailures.allow(c.RealIP(), s.lab.Now())
	}
}
