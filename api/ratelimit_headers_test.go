package api_test

import (
	"net/http"
	"strconv"
	"testing"

	"curvekeeper/api"
)

// TestRateLimitHeaders: every answer to a token states its quota in the
// RateLimit header fields of draft-ietf-httpapi-ratelimit-headers-06, and
// RateLimit-Remaining counts down to the 429. On the test's fixed clock the
// bucket never refills, so the numbers are exact: burst 3 at 0.001 a second.
func TestRateLimitHeaders(t *testing.T) {
	t.Parallel()
	e := newEnvConfig(t, api.Config{RateLimit: 0.001, RateBurst: 3})
	_, qa := e.token(t, "qa", "curves:review")
	paths := []string{"/v1/curves", "/v1/curves/00000000-0000-4000-8000-000000000000", "/v1/curves", "/v1/curves"}
	wantStatus := []int{http.StatusOK, http.StatusNotFound, http.StatusOK, http.StatusTooManyRequests}
	for i, path := range paths {
		r := e.get(t, qa, path)
		if r.status != wantStatus[i] {
			t.Fatalf("request %d %s: %s, want %d", i+1, path, r, wantStatus[i])
		}
		remaining := max(0, 2-i) // the 4th is refused and takes nothing
		want := map[string]string{
			"RateLimit-Limit":     "3",
			"RateLimit-Remaining": strconv.Itoa(remaining),
			// (3 − remaining) tokens to refill at 0.001 a second.
			"RateLimit-Reset":  strconv.Itoa((3 - remaining) * 1000),
			"RateLimit-Policy": "3;w=3000",
		}
		for h, v := range want {
			if got := r.header.Get(h); got != v {
				t.Errorf("request %d (%d): %s = %q, want %q", i+1, r.status, h, got, v)
			}
		}
	}
	// A request without a valid token is not counted and gets no quota.
	if r := e.get(t, "", "/v1/curves"); r.status != http.StatusUnauthorized || r.header.Get("RateLimit-Limit") != "" {
		t.Errorf("without a token: %s, RateLimit-Limit %q; want 401 without it", r, r.header.Get("RateLimit-Limit"))
	}
}
