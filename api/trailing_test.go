package api_test

import (
	"fmt"
	"net/http"
	"testing"
	"time"
)

// TestTrailingDataRefused: a JSON body with anything after its value (a
// second value, garbage) is malformed and answered 400 on every JSON route,
// through the fast paths as through the spec's validator, and writes
// nothing. The same body without the trailing data is accepted.
func TestTrailingDataRefused(t *testing.T) {
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	_, qa := e.token(t, "qa-lead", "curves:review")
	run := e.run(t, e.admin, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)))
	curve := "/v1/curves/" + run.Curves[0].ID.String()
	at := baseTime.Add(time.Hour).Format(time.RFC3339)
	n := 0
	routes := []struct {
		name, token, path string
		body              func() any
		ok                int
	}{
		{"create run", e.admin, "/v1/runs", func() any {
			n++
			return runBody("nitrate-uv", "photometer-7", baseTime.AddDate(0, 0, n), standards("nitrate", uint64(n+1)))
		}, 201},
		{"curve predictions", e.admin, curve + "/predictions", func() any {
			return map[string]any{"samples": []map[string]any{{"id": "W-1", "responses": []float64{1.5}}}}
		}, 200},
		{"instrument predictions", e.admin, "/v1/instruments/photometer-7/predictions", func() any {
			return map[string]any{"analyte": "nitrate", "at": at, "samples": []map[string]any{{"id": "W-1", "responses": []float64{1.5}}}}
		}, 404}, // no approved curve in force: well-formed, refused by a rule
		{"samples", e.admin, "/v1/runs/" + run.ID.String() + "/samples", func() any {
			n++
			return map[string]any{"samples": []map[string]any{{"id": fmt.Sprintf("MX-%d", n), "analyte": "nitrate", "responses": []float64{1.5}, "acquired_at": at}}}
		}, 201},
		{"verification", e.admin, curve + "/verifications", func() any {
			return map[string]any{"level": "CCV", "concentration": 2, "responses": []float64{1.04}, "kind": "continuing", "acquired_at": at}
		}, 201},
		{"method", e.admin, "/v1/methods", func() any {
			n++
			return map[string]any{"name": fmt.Sprintf("m-%d", n), "model": "linear", "weighting": "none",
				"analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L"}}}
		}, 201},
		{"token", e.admin, "/v1/tokens", func() any { return map[string]any{"name": "lims-9", "scopes": []string{"results:read"}} }, 201},
		{"exclusion", qa, curve + "/exclusions", func() any {
			return map[string]any{"reason": "late injection", "points": []map[string]any{{"level": "L2", "replicate": 1}}}
		}, 0}, // checked last: it supersedes the curve
		{"review", qa, curve + "/review", func() any { return map[string]any{"decision": "reject", "reason": "no"} }, 0},
	}
	for _, r := range routes {
		for _, tail := range []string{" garbage", "{}", " {\"a\":1}", "\n[]", "]"} {
			body := append(mustJSON(t, r.body()), tail...)
			before := e.counts(t)
			got := e.do(t, call{method: http.MethodPost, path: r.path, token: r.token, contentType: "application/json", body: body})
			wantProblem(t, got, http.StatusBadRequest, "")
			if d := before.diff(e.counts(t)); d != "" {
				t.Errorf("%s with %q after the value wrote rows: %s", r.name, tail, d)
			}
		}
		if r.ok != 0 {
			body := append(mustJSON(t, r.body()), " \r\n\t"...)
			if got := e.do(t, call{method: http.MethodPost, path: r.path, token: r.token, contentType: "application/json", body: body}); got.status != r.ok {
				t.Errorf("%s with trailing white space: %s, want %d", r.name, got, r.ok)
			}
		}
	}
}
