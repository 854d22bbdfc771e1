// Package apitest holds test helpers that check the service's responses
// against openapi/openapi.yaml, so that the spec and the code cannot drift.
// It is imported by tests only.
package apitest

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"mime"
	"net/http"
	"net/http/httptest"
	"regexp"
	"strings"
	"sync"
	"testing"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/getkin/kin-openapi/openapi3filter"
	"github.com/getkin/kin-openapi/routers"
	"github.com/getkin/kin-openapi/routers/gorillamux"

	"curvekeeper/openapi"
)

func init() {
	// The spec describes these bodies as text (`type: string`): the plot's
	// SVG source and the YAML document itself. kin-openapi has no decoder for
	// SVG and decodes YAML into a map, so neither could match; read both as
	// plain text.
	openapi3filter.RegisterBodyDecoder("image/svg+xml", openapi3filter.PlainBodyDecoder)
	openapi3filter.RegisterBodyDecoder("application/yaml", openapi3filter.PlainBodyDecoder)
	// HL7 v2 ER7 messages are text too (`type: string`).
	openapi3filter.RegisterBodyDecoder("x-application/hl7-v2+er7", openapi3filter.PlainBodyDecoder)
}

// spec is the loaded document and a router over it, built once.
type spec struct {
	doc    *openapi3.T
	router routers.Router
}

var loadSpec = sync.OnceValues(func() (*spec, error) {
	doc, err := openapi3.NewLoader().LoadFromData(openapi.YAML)
	if err != nil {
		return nil, fmt.Errorf("apitest: load openapi.yaml: %w", err)
	}
	if err := doc.Validate(context.Background()); err != nil {
		return nil, fmt.Errorf("apitest: validate openapi.yaml: %w", err)
	}
	router, err := gorillamux.NewRouter(doc)
	if err != nil {
		return nil, fmt.Errorf("apitest: route openapi.yaml: %w", err)
	}
	return &spec{doc: doc, router: router}, nil
})

// ValidateResponse checks that resp, the answer to req, is one the spec
// documents: a status listed for the route, the headers it requires and a body
// of the documented content type that matches the schema. Error responses
// must also be well-formed RFC 9457 problems (see checkProblem). body is the
// response body, which the caller has already read. Each mismatch fails t
// (without stopping it) with the request, the status and what is wrong.
func ValidateResponse(t testing.TB, req *http.Request, resp *http.Response, body []byte) {
	t.Helper()
	for _, msg := range Mismatches(req, resp, body) {
		t.Errorf("%s %s → %d: %s\nbody: %s", req.Method, req.URL.RequestURI(), resp.StatusCode, msg, snippet(body))
	}
}

// ValidateRecorder is ValidateResponse for a response recorded by httptest.
func ValidateRecorder(t testing.TB, req *http.Request, rec *httptest.ResponseRecorder) {
	t.Helper()
	ValidateResponse(t, req, rec.Result(), rec.Body.Bytes())
}

// Mismatches returns every way resp, the answer to req with the given body,
// departs from the spec; none means it conforms.
func Mismatches(req *http.Request, resp *http.Response, body []byte) []string {
	s, err := loadSpec()
	if err != nil {
		return []string{err.Error()}
	}
	route, params, err := s.router.FindRoute(req)
	if err != nil {
		return []string{fmt.Sprintf("the spec has no route for %s %s: %v", req.Method, req.URL.Path, err)}
	}
	if r := route.Operation.Responses; r.Status(resp.StatusCode) == nil && r.Default() == nil {
		return []string{fmt.Sprintf("status %d is not documented for %s %s", resp.StatusCode, route.Method, route.Path)}
	}
	opts := &openapi3filter.Options{
		IncludeResponseStatus: true,
		MultiError:            true,
		AuthenticationFunc:    openapi3filter.NoopAuthenticationFunc,
	}
	in := &openapi3filter.ResponseValidationInput{
		RequestValidationInput: &openapi3filter.RequestValidationInput{
			Request: req, PathParams: params, Route: route, Options: opts,
		},
		Status:  resp.StatusCode,
		Header:  resp.Header,
		Body:    io.NopCloser(bytes.NewReader(body)),
		Options: opts,
	}
	var out []string
	if err := openapi3filter.ValidateResponse(context.Background(), in); err != nil {
		out = append(out, flatten(err)...)
	}
	if resp.StatusCode >= 400 {
		out = append(out, checkProblem(resp, body)...)
	}
	return out
}

// flatten turns kin-openapi's errors into one readable line each.
func flatten(err error) []string {
	var multi openapi3.MultiError
	if errors.As(err, &multi) {
		var out []string
		for _, e := range multi {
			out = append(out, flatten(e)...)
		}
		return out
	}
	var re *openapi3filter.ResponseError
	if errors.As(err, &re) {
		msg := re.Reason
		if re.Err != nil {
			inner := flatten(re.Err)
			if msg == "" {
				return inner
			}
			for i, s := range inner {
				inner[i] = msg + ": " + s
			}
			return inner
		}
		return []string{msg}
	}
	var se *openapi3.SchemaError
	if errors.As(err, &se) {
		at := "/" + strings.Join(se.JSONPointer(), "/")
		return []string{fmt.Sprintf("at %s: %s", at, se.Reason)}
	}
	return []string{strings.ReplaceAll(err.Error(), "\n", " ")}
}

// parameterRef names a parameter in a problem's errors, e.g. "query:limit".
var parameterRef = regexp.MustCompile(`^(query|path|header):[A-Za-z0-9_-]+$`)

// checkProblem holds error bodies to the rules the spec's prose sets beyond
// the schema: an RFC 9457 problem whose status is the response's, whose 500s
// say only "internal error" with a request id, and whose errors name fields by
// JSON Pointer, CSV cell (/lines/<n>/<column>) or parameter (<in>:<name>).
func checkProblem(resp *http.Response, body []byte) []string {
	ct, _, err := mime.ParseMediaType(resp.Header.Get("Content-Type"))
	if err != nil || ct != "application/problem+json" {
		return []string{fmt.Sprintf("error response with Content-Type %q, want application/problem+json",
			resp.Header.Get("Content-Type"))}
	}
	var p struct {
		Type      string `json:"type"`
		Title     string `json:"title"`
		Status    int    `json:"status"`
		Detail    string `json:"detail"`
		RequestID string `json:"request_id"`
		Errors    []struct {
			Pointer string `json:"pointer"`
			Detail  string `json:"detail"`
		} `json:"errors"`
	}
	if err := json.Unmarshal(body, &p); err != nil {
		return []string{fmt.Sprintf("problem body does not decode: %v", err)}
	}
	var out []string
	if p.Status != resp.StatusCode {
		out = append(out, fmt.Sprintf("problem status %d, response status %d", p.Status, resp.StatusCode))
	}
	if p.Type == "" || p.Title == "" || p.Detail == "" {
		out = append(out, "problem without type, title or detail")
	}
	if id := resp.Header.Get("X-Request-Id"); id != "" && p.RequestID != "" && p.RequestID != id {
		out = append(out, fmt.Sprintf("problem request_id %q, X-Request-Id %q", p.RequestID, id))
	}
	if resp.StatusCode == http.StatusInternalServerError {
		if p.Detail != "internal error" {
			out = append(out, fmt.Sprintf("500 with detail %q, want only \"internal error\"", p.Detail))
		}
		if p.RequestID == "" {
			out = append(out, "500 without request_id")
		}
	}
	for i, e := range p.Errors {
		if !validPointer(e.Pointer) {
			out = append(out, fmt.Sprintf("errors[%d].pointer %q is neither a JSON Pointer nor <in>:<name>", i, e.Pointer))
		}
		if e.Detail == "" {
			out = append(out, fmt.Sprintf("errors[%d] without detail", i))
		}
	}
	return out
}

// validPointer reports whether p is an RFC 6901 JSON Pointer ("" or "/…",
// with "~" only as "~0" or "~1") or a parameter reference.
func validPointer(p string) bool {
	if parameterRef.MatchString(p) {
		return true
	}
	if p != "" && !strings.HasPrefix(p, "/") {
		return false
	}
	for i := 0; i < len(p); i++ {
		if p[i] == '~' && (i+1 == len(p) || (p[i+1] != '0' && p[i+1] != '1')) {
			return false
		}
	}
	return true
}

func snippet(body []byte) string {
	const max = 4000
	if len(body) > max {
		return string(body[:max]) + "…"
	}
	return string(body)
}
