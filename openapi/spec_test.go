package openapi

import (
	"context"
	"slices"
	"sort"
	"strconv"
	"strings"
	"testing"

	"github.com/getkin/kin-openapi/openapi3"
)

// load parses and validates the embedded document with kin-openapi, the
// library the request validator uses.
func load(t *testing.T) *openapi3.T {
	t.Helper()
	doc, err := openapi3.NewLoader().LoadFromData(YAML)
	if err != nil {
		t.Fatalf("load openapi.yaml: %v", err)
	}
	if err := doc.Validate(context.Background()); err != nil {
		t.Fatalf("validate openapi.yaml: %v", err)
	}
	return doc
}

// operation is one method of one path.
type operation struct {
	path, method string
	op           *openapi3.Operation
}

func (o operation) String() string { return o.method + " " + o.path }

func operations(doc *openapi3.T) []operation {
	var ops []operation
	for path, item := range doc.Paths.Map() {
		for method, op := range item.Operations() {
			ops = append(ops, operation{path, method, op})
		}
	}
	sort.Slice(ops, func(i, j int) bool { return ops[i].String() < ops[j].String() })
	return ops
}

func TestSpecLoadsAndValidates(t *testing.T) {
	doc := load(t)
	if got, want := doc.OpenAPI, "3.1.0"; got != want {
		t.Errorf("openapi version = %q, want %q", got, want)
	}
}

// TestRoutes pins the routes of the service contract (issue 4), of the
// results and QC loop (issue 5) and the operational ones: the external checks use exactly these paths.
func TestRoutes(t *testing.T) {
	want := []string{
		"DELETE /v1/tokens/{id}",
		"GET /healthz",
		"GET /metrics",
		"GET /openapi.yaml",
		"GET /readyz",
		"GET /v1/curves",
		"GET /v1/curves/{id}",
		"GET /v1/curves/{id}/audit",
		"GET /v1/curves/{id}/plot.png",
		"GET /v1/curves/{id}/plot.svg",
		"GET /v1/curves/{id}/verifications",
		"GET /v1/instruments/{instrument}/curves/current",
		"GET /v1/methods",
		"GET /v1/methods/{name}",
		"GET /v1/methods/{name}/top-down",
		"GET /v1/results",
		"GET /v1/results/{result_id}",
		"GET /v1/runs/{id}",
		"GET /v1/runs/{id}/results",
		"GET /v1/samples/{sample_id}",
		"GET /v1/standard-materials",
		"GET /v1/standard-materials/{code}",
		"GET /v1/trends",
		"GET /v1/trends/plot.svg",
		"POST /v1/curves/{id}/exclusions",
		"POST /v1/curves/{id}/predictions",
		"POST /v1/curves/{id}/review",
		"POST /v1/curves/{id}/verifications",
		"POST /v1/instruments/{instrument}/predictions",
		"POST /v1/instruments/{instrument}/predictions/batch",
		"POST /v1/methods",
		"POST /v1/runs",
		"POST /v1/runs/csv",
		"POST /v1/runs/{id}/samples",
		"POST /v1/standard-materials",
		"POST /v1/tokens",
		// people and signatures
		"GET /v1/audit",
		"GET /v1/curves/{id}/record.pdf",
		"GET /v1/curves/{id}/signatures",
		"GET /v1/people",
		"POST /v1/curves/{id}/recalculation",
		"POST /v1/curves/{id}/signatures",
		"POST /v1/people",
		"POST /v1/people/{login}/disable",
		"POST /v1/people/{login}/unlock",
		"POST /v1/signatures/{id}/withdrawal",
	}
	var got []string
	for _, o := range operations(load(t)) {
		got = append(got, o.String())
	}
	sort.Strings(want) // the people routes are listed as a block
	if !slices.Equal(got, want) {
		t.Errorf("routes:\n got %q\nwant %q", got, want)
	}
}

var knownScopes = []string{"runs:write", "results:read", "curves:review", "admin"}

func TestOperationsAreDocumented(t *testing.T) {
	doc := load(t)
	ids := map[string]string{}
	for _, o := range operations(doc) {
		t.Run(o.String(), func(t *testing.T) {
			if o.op.OperationID == "" {
				t.Fatal("no operationId")
			}
			if prev, dup := ids[o.op.OperationID]; dup {
				t.Errorf("operationId %q also used by %s", o.op.OperationID, prev)
			}
			ids[o.op.OperationID] = o.String()

			v1 := strings.HasPrefix(o.path, "/v1/")
			checkSecurity(t, doc, o, v1)
			scopes := requiredScopes(t, o.op)
			if v1 {
				if len(scopes) == 0 {
					t.Error("a /v1 route without x-required-scopes")
				}
				for _, s := range scopes {
					if !slices.Contains(knownScopes, s) {
						t.Errorf("x-required-scopes names unknown scope %q", s)
					}
				}
				if !slices.Contains(scopes, "admin") {
					t.Error("x-required-scopes does not admit admin")
				}
				for _, s := range scopes {
					if !strings.Contains(o.op.Description, "`"+s+"`") {
						t.Errorf("description does not name scope %q", s)
					}
				}
				for _, status := range []int{400, 401, 403, 429, 500, 503} {
					if o.op.Responses.Status(status) == nil {
						t.Errorf("no %d response", status)
					}
				}
			} else if scopes != nil {
				t.Errorf("x-required-scopes %q on an unauthenticated route", scopes)
			}
			if o.op.RequestBody != nil {
				for _, status := range []int{413, 415, 422} {
					if o.op.Responses.Status(status) == nil {
						t.Errorf("has a body but no %d response", status)
					}
				}
			}
			if strings.Contains(o.path, "{") && o.op.Responses.Status(404) == nil {
				t.Error("has a path parameter but no 404 response")
			}
			checkErrorResponses(t, o.op)
		})
	}
}

// checkSecurity: /v1 routes need the bearer scheme (inherited or their own),
// the others say `security: []` explicitly.
func checkSecurity(t *testing.T, doc *openapi3.T, o operation, v1 bool) {
	t.Helper()
	if !v1 {
		if o.op.Security == nil || len(*o.op.Security) != 0 {
			t.Error("an operational route without an explicit `security: []`")
		}
		return
	}
	reqs := doc.Security
	if o.op.Security != nil {
		reqs = *o.op.Security
	}
	if len(reqs) == 0 {
		t.Fatal("a /v1 route without a security requirement")
	}
	for _, r := range reqs {
		if _, ok := r["bearerAuth"]; !ok || len(r) != 1 {
			t.Errorf("security requirement %v, want only bearerAuth", r)
		}
	}
}

func requiredScopes(t *testing.T, op *openapi3.Operation) []string {
	t.Helper()
	raw, ok := op.Extensions["x-required-scopes"]
	if !ok {
		return nil
	}
	list, ok := raw.([]any)
	if !ok {
		t.Fatalf("x-required-scopes is %T, want a list", raw)
	}
	scopes := []string{}
	for _, v := range list {
		s, ok := v.(string)
		if !ok {
			t.Fatalf("x-required-scopes holds %T, want strings", v)
		}
		scopes = append(scopes, s)
	}
	return scopes
}

// checkErrorResponses: every 4xx and 5xx is application/problem+json with the
// Problem schema, and nothing else.
func checkErrorResponses(t *testing.T, op *openapi3.Operation) {
	t.Helper()
	for code, ref := range op.Responses.Map() {
		status, err := strconv.Atoi(code)
		if err != nil {
			t.Errorf("response %q: only explicit status codes are used", code)
			continue
		}
		if status < 400 {
			continue
		}
		content := ref.Value.Content
		mt := content.Get("application/problem+json")
		if mt == nil || len(content) != 1 {
			t.Errorf("response %d: content %v, want only application/problem+json", status, keys(content))
			continue
		}
		if got, want := mt.Schema.Ref, "#/components/schemas/Problem"; got != want {
			t.Errorf("response %d: schema %q, want %q", status, got, want)
		}
	}
}

func keys(c openapi3.Content) []string {
	var ks []string
	for k := range c {
		ks = append(ks, k)
	}
	sort.Strings(ks)
	return ks
}

// TestNumbersAreDoubles: a number without format double would be generated
// as float32.
func TestNumbersAreDoubles(t *testing.T) {
	doc := load(t)
	for name, ref := range doc.Components.Schemas {
		walk(ref, "#/components/schemas/"+name, map[*openapi3.Schema]bool{}, func(at string, s *openapi3.Schema) {
			if s.Type.Includes("number") && s.Format != "double" {
				t.Errorf("%s: number with format %q, want double", at, s.Format)
			}
		})
	}
	for _, o := range operations(doc) {
		for _, p := range o.op.Parameters {
			if s := p.Value.Schema.Value; s.Type.Includes("number") && s.Format != "double" {
				t.Errorf("%s parameter %s: number with format %q, want double", o, p.Value.Name, s.Format)
			}
		}
	}
}

// TestRequestObjectsAreClosed: every object a client sends refuses unknown
// fields.
func TestRequestObjectsAreClosed(t *testing.T) {
	doc := load(t)
	for _, o := range operations(doc) {
		if o.op.RequestBody == nil {
			continue
		}
		for ct, mt := range o.op.RequestBody.Value.Content {
			walk(mt.Schema, o.String()+" "+ct, map[*openapi3.Schema]bool{}, func(at string, s *openapi3.Schema) {
				if s.Type.Includes("object") && (s.AdditionalProperties.Has == nil || *s.AdditionalProperties.Has) {
					t.Errorf("%s: request object without additionalProperties: false", at)
				}
			})
		}
	}
}

// walk calls f on ref's schema and every schema inside it, once each.
func walk(ref *openapi3.SchemaRef, at string, seen map[*openapi3.Schema]bool, f func(string, *openapi3.Schema)) {
	if ref == nil || ref.Value == nil || seen[ref.Value] {
		return
	}
	s := ref.Value
	seen[s] = true
	f(at, s)
	for name, p := range s.Properties {
		walk(p, at+"/"+name, seen, f)
	}
	walk(s.Items, at+"/items", seen, f)
	for i, group := range []openapi3.SchemaRefs{s.AllOf, s.OneOf, s.AnyOf} {
		for j, sub := range group {
			walk(sub, at+"/"+[]string{"allOf", "oneOf", "anyOf"}[i]+"/"+strconv.Itoa(j), seen, f)
		}
	}
	walk(s.AdditionalProperties.Schema, at+"/additionalProperties", seen, f)
}

// TestContractFields pins the JSON field names the service contract (issue 4)
// names: each must be a required property of its schema.
func TestContractFields(t *testing.T) {
	doc := load(t)
	tests := map[string][]string{
		"RunRequest":         {"method", "instrument", "acquired_at", "standards"},
		"StandardInput":      {"analyte", "level", "concentration", "responses"},
		"RunSampleInput":     {"id", "analyte", "responses"},
		"RunCreated":         {"id", "curves"},
		"RunCurve":           {"id", "analyte", "verdict"},
		"MethodRequest":      {"name", "model", "weighting", "analytes"},
		"Analyte":            {"name", "unit"},
		"TokenRequest":       {"name", "scopes"},
		"TokenCreated":       {"id", "token"},
		"CurveList":          {"curves", "next_cursor"},
		"PredictionRequest":  {"samples"},
		"PredictionSample":   {"id", "responses"},
		"PredictionResponse": {"curve_id", "results", "cautions"},
		"PredictionResult":   {"id", "concentration", "standard_error", "interval", "flags"},
		"Interval":           {"low", "high", "level", "bounded"},
		"ReviewRequest":      {"decision"},
		"AuditLog":           {"events"},
		"AuditEvent":         {"at", "actor", "action", "detail"},
		"Curve": {"id", "run_id", "method", "method_revision", "instrument", "analyte", "unit",
			"model", "weighting", "coefficients", "standard_errors", "covariance", "residual_sd",
			"df", "r_squared", "weight_convention", "points", "checks", "limits", "range",
			"verdict", "status", "cautions", "engine_version"},
		"CurvePoint": {"level", "concentration", "response", "fitted", "residual",
			"studentized_residual", "leverage", "cooks_distance", "back_calculated",
			"relative_error_pct", "excluded"},
		"Check":   {"name", "statistic", "limit", "passed", "source", "detail"},
		"Limits":  {"lod", "loq", "critical_value", "detection_limit"},
		"Range":   {"low", "high"},
		"Problem": {"type", "title", "status", "detail"},
	}
	optional := map[string][]string{
		"RunRequest":        {"operator", "samples"},
		"RunSampleInput":    {"dilution"},
		"PredictionRequest": {"confidence"},
		"PredictionSample":  {"dilution"},
		"ReviewRequest":     {"reason"},
		"MethodRequest":     {"confidence", "acceptance"},
		"Problem":           {"instance", "request_id", "errors"},
	}
	for name, fields := range tests {
		t.Run(name, func(t *testing.T) {
			ref := doc.Components.Schemas[name]
			if ref == nil {
				t.Fatalf("no schema %s", name)
			}
			for _, f := range fields {
				if ref.Value.Properties[f] == nil {
					t.Errorf("no property %q", f)
				}
				if !slices.Contains(ref.Value.Required, f) {
					t.Errorf("property %q is not required", f)
				}
			}
			for _, f := range optional[name] {
				if ref.Value.Properties[f] == nil {
					t.Errorf("no optional property %q", f)
				}
				if slices.Contains(ref.Value.Required, f) {
					t.Errorf("property %q is required, want optional", f)
				}
			}
		})
	}
}

// TestNullableChecks: statistic and limit of a check are nullable numbers,
// since some checks have no statistic or could not be computed.
func TestNullableChecks(t *testing.T) {
	check := load(t).Components.Schemas["Check"].Value
	for _, f := range []string{"statistic", "limit"} {
		p := check.Properties[f].Value
		if !p.Type.Includes("number") || !p.Type.IncludesNull() {
			t.Errorf("check.%s: type %v, want a nullable number [number null]", f, p.Type.Slice())
		}
	}
}

// TestIntegerParametersAreBounded: every integer query or path parameter has
// a maximum that fits the database's 32-bit integers, so an out-of-range value
// is refused by the validator (400) rather than reaching the driver (500); an
// int64 parameter (a result id, a bigint column) may reach 2^53−1, the bound
// of every id.
func TestIntegerParametersAreBounded(t *testing.T) {
	doc := load(t)
	n := 0
	for _, o := range operations(doc) {
		for _, pr := range o.op.Parameters {
			p := pr.Value
			if p.Schema == nil || p.Schema.Value == nil || !p.Schema.Value.Type.Includes("integer") {
				continue
			}
			n++
			s := p.Schema.Value
			bound := 2147483647.0
			if s.Format == "int64" {
				bound = 9007199254740991
			}
			if s.Max == nil || *s.Max > bound || s.Min == nil {
				t.Errorf("%s: integer parameter %q lacks a minimum and a maximum ≤ %.0f", o, p.Name, bound)
			}
		}
	}
	if n == 0 {
		t.Error("found no integer parameter; the walk is wrong")
	}
}
