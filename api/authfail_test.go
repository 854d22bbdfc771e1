package api_test

import (
	"net/http"
	"strconv"
	"testing"

	"curvekeeper/api"
)

// TestFailedAuthenticationsAreLimitedPerAddress: after AuthFailureBurst
// unknown tokens from one address, the next request from it gets 429 with
// Retry-After, whatever token it carries, until the bucket refills.
func TestFailedAuthenticationsAreLimitedPerAddress(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	for i := range api.AuthFailureBurst {
		r := e.get(t, "made-up-token-"+strconv.Itoa(i), "/v1/curves")
		if r.status != http.StatusUnauthorized {
			t.Fatalf("failure %d: %s, want 401", i+1, r)
		}
	}
	for _, token := range []string{"made-up-token-x", e.admin} {
		r := e.get(t, token, "/v1/curves")
		wantProblem(t, r, http.StatusTooManyRequests, "")
		if secs, err := strconv.Atoi(r.header.Get("Retry-After")); err != nil || secs < 1 {
			t.Errorf("Retry-After %q, want whole seconds ≥ 1", r.header.Get("Retry-After"))
		}
	}
}

// TestValidTokensAreNotCountedAsFailures: a client with a valid token is never
// limited by the failure counter, however many requests it sends.
func TestValidTokensAreNotCountedAsFailures(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	for i := range 3 * api.AuthFailureBurst {
		if r := e.get(t, e.admin, "/v1/curves"); r.status != http.StatusOK {
			t.Fatalf("request %d: %s", i+1, r)
		}
	}
}

// TestMachineReadersGetMoreRate: a token whose only scope is results:read (a
// LIMS reading back) gets ReaderRateFactor times the rate and burst; an
// instrument's token keeps the base.
func TestMachineReadersGetMoreRate(t *testing.T) {
	t.Parallel()
	e := newEnvConfig(t, api.Config{RateLimit: 0.001, RateBurst: 3})
	_, lims := e.token(t, "lims", "results:read")
	_, qa := e.token(t, "qa", "curves:review")
	count := func(token string) int {
		for i := range 100 {
			if r := e.get(t, token, "/v1/curves"); r.status == http.StatusTooManyRequests {
				return i
			} else if r.status != http.StatusOK {
				t.Fatalf("request %d: %s", i+1, r)
			}
		}
		return 100
	}
	if got, want := count(lims), 3*api.ReaderRateFactor; got != want {
		t.Errorf("results:read token: 429 after %d requests, want %d", got, want)
	}
	if got := count(qa); got != 3 {
		t.Errorf("curves:review token: 429 after %d requests, want 3", got)
	}
}
