package openapi

import (
	"context"
	"fmt"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"

	"github.com/getkin/kin-openapi/openapi3filter"
	"github.com/getkin/kin-openapi/routers"
	"github.com/getkin/kin-openapi/routers/gorillamux"
)

const validRun = `{"method":"nitrate-uv","instrument":"photometer-1","acquired_at":"2026-11-03T08:30:00Z",
 "operator":"a.tech@lab",
 "standards":[{"analyte":"nitrate","level":"L1","concentration":0.5,"responses":[0.0102,0.0098]},
              {"analyte":"nitrate","level":"L2","concentration":1.0,"responses":[0.0205]}],
 "samples":[{"id":"W-0042","analyte":"nitrate","responses":[0.025],"dilution":2}]}`

const validCSV = "# exported by instrument photometer-1\r\n" +
	"kind,analyte,level,concentration,response,sample_id,dilution\r\n" +
	"standard,nitrate,L1,0.5,0.0102,,\r\n" +
	"sample,nitrate,,,0.0250,W-0042,\r\n"

// TestRequestValidation runs requests through kin-openapi's request
// validator, as the server's validation middleware does, to show that the
// spec refuses the bad input it is meant to refuse and admits good input.
//
// kin-openapi's own text/csv decoder parses with encoding/csv and refuses
// comment lines and ragged rows with a bare 400, so the server registers
// PlainBodyDecoder for text/csv and leaves the layout to its own CSV decoder
// (422 with /lines pointers, as the spec says); the test does the same.
func TestRequestValidation(t *testing.T) {
	openapi3filter.RegisterBodyDecoder("text/csv", openapi3filter.PlainBodyDecoder)
	t.Cleanup(func() { openapi3filter.RegisterBodyDecoder("text/csv", openapi3filter.CsvBodyDecoder) })
	doc := load(t)
	router, err := gorillamux.NewRouter(doc)
	if err != nil {
		t.Fatal(err)
	}
	run := func(edit func(string) string) string { return edit(validRun) }
	const curve = "/v1/curves/6f1c2b8e-3d4a-4e5f-9a0b-1c2d3e4f5a6b"
	many := strings.TrimSuffix(strings.Repeat(`{"id":"s","responses":[1]},`, 1001), ",")
	tests := []struct {
		name, method, target, contentType, body string
		header                                  map[string]string
		wantErr                                 bool
	}{
		{name: "valid run", method: "POST", target: "/v1/runs", contentType: "application/json", body: validRun},
		{name: "unknown field", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: run(func(s string) string { return strings.Replace(s, `"operator"`, `"opertor"`, 1) }), wantErr: true},
		{name: "negative concentration", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: run(func(s string) string { return strings.Replace(s, `"concentration":0.5`, `"concentration":-0.5`, 1) }), wantErr: true},
		{name: "huge concentration", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: run(func(s string) string { return strings.Replace(s, `"concentration":0.5`, `"concentration":1e308`, 1) }), wantErr: true},
		{name: "huge negative response", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: run(func(s string) string { return strings.Replace(s, `0.0098`, `-1e308`, 1) }), wantErr: true},
		{name: "NaN spelled as a string", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: run(func(s string) string { return strings.Replace(s, `0.0098`, `"NaN"`, 1) }), wantErr: true},
		{name: "empty responses", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: run(func(s string) string { return strings.Replace(s, `[0.0205]`, `[]`, 1) }), wantErr: true},
		{name: "control character in instrument", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: run(func(s string) string { return strings.Replace(s, `photometer-1`, `photo\u0007meter`, 1) }), wantErr: true},
		{name: "unicode in level", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: run(func(s string) string { return strings.Replace(s, `"L2"`, `"L²"`, 1) }), wantErr: true},
		{name: "SQL metacharacters in analyte", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: run(func(s string) string { return strings.Replace(s, `"nitrate"`, `"x'; drop table runs;--"`, 1) }), wantErr: true},
		{name: "zero dilution", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: run(func(s string) string { return strings.Replace(s, `"dilution":2`, `"dilution":0`, 1) }), wantErr: true},
		{name: "missing standards", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: `{"method":"m","instrument":"i","acquired_at":"2026-11-03T08:30:00Z"}`, wantErr: true},
		{name: "malformed JSON", method: "POST", target: "/v1/runs", contentType: "application/json",
			body: `{"method":`, wantErr: true},
		{name: "valid idempotency key", method: "POST", target: "/v1/runs", contentType: "application/json", body: validRun,
			header: map[string]string{"Idempotency-Key": "6f1c2b8e-3d4a-4e5f-9a0b-1c2d3e4f5a6b"}},
		{name: "idempotency key too long", method: "POST", target: "/v1/runs", contentType: "application/json", body: validRun,
			header: map[string]string{"Idempotency-Key": strings.Repeat("k", 129)}, wantErr: true},
		{name: "valid CSV", method: "POST", contentType: "text/csv; charset=utf-8", body: validCSV,
			target: "/v1/runs?method=nitrate-uv&instrument=photometer-1&acquired_at=2026-11-03T08:30:00Z"},
		{name: "CSV with a bad acquired_at", method: "POST", contentType: "text/csv", body: validCSV,
			target: "/v1/runs?method=nitrate-uv&instrument=photometer-1&acquired_at=yesterday", wantErr: true},
		{name: "unsupported content type", method: "POST", target: "/v1/runs", contentType: "application/xml",
			body: "<run/>", wantErr: true},
		{name: "list with defaults", method: "GET", target: "/v1/curves"},
		{name: "list with every filter", method: "GET",
			target: "/v1/curves?instrument=photometer-1&analyte=nitrate&method=nitrate-uv&status=pending_review&verdict=fail&from=2026-11-01T00:00:00Z&to=2026-11-08T00:00:00Z&limit=200&cursor=abc_-9"},
		{name: "limit 0", method: "GET", target: "/v1/curves?limit=0", wantErr: true},
		{name: "limit 201", method: "GET", target: "/v1/curves?limit=201", wantErr: true},
		{name: "unknown status", method: "GET", target: "/v1/curves?status=done", wantErr: true},
		{name: "cursor with padding", method: "GET", target: "/v1/curves?cursor=abc%3D", wantErr: true},
		{name: "id not a UUID", method: "GET", target: "/v1/curves/42", wantErr: true},
		{name: "valid prediction", method: "POST", target: curve + "/predictions", contentType: "application/json",
			body: `{"confidence":0.99,"samples":[{"id":"W-1","responses":[0.1,0.11],"dilution":10}]}`},
		{name: "confidence 1", method: "POST", target: curve + "/predictions", contentType: "application/json",
			body: `{"confidence":1,"samples":[{"id":"W-1","responses":[0.1]}]}`, wantErr: true},
		{name: "1001 samples", method: "POST", target: curve + "/predictions", contentType: "application/json",
			body: `{"samples":[` + many + `]}`, wantErr: true},
		{name: "valid review", method: "POST", target: curve + "/review", contentType: "application/json",
			body: `{"decision":"approve","reason":"slope within the lab's control limits;\nchecked against CCV\r\nby QA"}`},
		{name: "review reason with a vertical tab", method: "POST", target: curve + "/review", contentType: "application/json",
			body: `{"decision":"reject","reason":"bad\u000b"}`, wantErr: true},
		{name: "review decision outside the enum", method: "POST", target: curve + "/review", contentType: "application/json",
			body: `{"decision":"maybe"}`, wantErr: true},
		{name: "review reason with a control character", method: "POST", target: curve + "/review", contentType: "application/json",
			body: `{"decision":"reject","reason":"bad\u0000"}`, wantErr: true},
		{name: "valid method", method: "POST", target: "/v1/methods", contentType: "application/json",
			body: `{"name":"nitrate-uv","model":"linear","weighting":"1/x^2","confidence":0.95,"analytes":[{"name":"nitrate","unit":"mg/L"}],"acceptance":{"min_levels":5,"min_r_squared":0.995,"mandatory":["min_levels","r_squared"]}}`},
		{name: "method with an unknown threshold", method: "POST", target: "/v1/methods", contentType: "application/json",
			body: `{"name":"m","model":"linear","weighting":"none","analytes":[{"name":"a","unit":"mg/L"}],"acceptance":{"max_slope":3}}`, wantErr: true},
		{name: "valid token", method: "POST", target: "/v1/tokens", contentType: "application/json",
			body: `{"name":"lims-1","scopes":["results:read"]}`},
		{name: "token with an unknown scope", method: "POST", target: "/v1/tokens", contentType: "application/json",
			body: `{"name":"lims-1","scopes":["root"]}`, wantErr: true},
		{name: "token with repeated scopes", method: "POST", target: "/v1/tokens", contentType: "application/json",
			body: `{"name":"lims-1","scopes":["admin","admin"]}`, wantErr: true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			req := httptest.NewRequest(tt.method, tt.target, strings.NewReader(tt.body))
			if tt.contentType != "" {
				req.Header.Set("Content-Type", tt.contentType)
			}
			for k, v := range tt.header {
				req.Header.Set(k, v)
			}
			err := validateRequest(router, req)
			if got := err != nil; got != tt.wantErr {
				t.Errorf("error = %v, want error: %v", err, tt.wantErr)
			}
		})
	}
}

func validateRequest(router routers.Router, req *http.Request) error {
	route, params, err := router.FindRoute(req)
	if err != nil {
		return fmt.Errorf("find route: %w", err)
	}
	return openapi3filter.ValidateRequest(context.Background(), &openapi3filter.RequestValidationInput{
		Request: req, PathParams: params, Route: route,
		Options: &openapi3filter.Options{AuthenticationFunc: openapi3filter.NoopAuthenticationFunc},
	})
}
