package openapi

import (
	"encoding/json"
	"strings"
	"testing"

	"github.com/getkin/kin-openapi/openapi3"
)

// allSchemas calls f on every schema of the document: the components and
// the parameters, request bodies and responses of every operation.
func allSchemas(doc *openapi3.T, f func(string, *openapi3.Schema)) {
	seen := map[*openapi3.Schema]bool{}
	for name, ref := range doc.Components.Schemas {
		walk(ref, "#/components/schemas/"+name, seen, f)
	}
	for _, o := range operations(doc) {
		for _, p := range o.op.Parameters {
			walk(p.Value.Schema, o.String()+" parameter "+p.Value.Name, seen, f)
		}
		if o.op.RequestBody != nil {
			for ct, mt := range o.op.RequestBody.Value.Content {
				walk(mt.Schema, o.String()+" request "+ct, seen, f)
			}
		}
		for code, r := range o.op.Responses.Map() {
			for ct, mt := range r.Value.Content {
				walk(mt.Schema, o.String()+" "+code+" "+ct, seen, f)
			}
		}
	}
}

// TestNullIsAType: the document is OpenAPI 3.1, where null is a JSON
// Schema type: a schema that admits null says so by `type: [T, "null"]` or,
// for a reference, `oneOf: [{$ref}, {type: "null"}]`, a form linters,
// JSON Schema validators and generators read alike. The 3.0 keyword
// `nullable` (which 3.1 tools ignore, and which 3.0 tools misread beside
// allOf) appears nowhere, and there are as many nullable schemas as the 45
// of the 3.0 document.
func TestNullIsAType(t *testing.T) {
	n := 0
	allSchemas(load(t), func(at string, s *openapi3.Schema) {
		if s.Nullable {
			t.Errorf("%s: nullable keyword in a 3.1 document", at)
		}
		if s.Type.IncludesNull() && !s.Type.Is("null") {
			n++
			if len(s.Type.Slice()) != 2 {
				t.Errorf("%s: type %v, want one type and null", at, s.Type.Slice())
			}
		}
		if len(s.OneOf) == 2 && s.OneOf[1].Value.Type.Is("null") {
			n++
			if s.OneOf[0].Ref == "" || s.Type != nil {
				t.Errorf("%s: a nullable reference is oneOf [{$ref}, {type: null}] and nothing else", at)
			}
		}
	})
	if n < 45 {
		t.Errorf("%d schemas admit null, want at least the 45 of the 3.0 document", n)
	}
}

// TestNullableReferences: the two nullable references accept null and a
// value of the referenced schema, and refuse a value of another type, under
// kin-openapi (the server's validator), with its default options and with
// JSON Schema 2020-12 validation.
func TestNullableReferences(t *testing.T) {
	doc := load(t)
	tests := []struct {
		schema, property string
		valid, invalid   any
	}{
		{"ResultEvent", "previous_state", "withheld", 7.0},
		{"CurveInForce", "last_verification", nil, "a string"},
	}
	for _, tc := range tests {
		p := doc.Components.Schemas[tc.schema].Value.Properties[tc.property].Value
		for _, opts := range [][]openapi3.SchemaValidationOption{nil, {openapi3.EnableJSONSchema2020()}} {
			if err := p.VisitJSON(nil, opts...); err != nil {
				t.Errorf("%s.%s refuses null: %v", tc.schema, tc.property, err)
			}
			if tc.valid != nil {
				if err := p.VisitJSON(tc.valid, opts...); err != nil {
					t.Errorf("%s.%s refuses %v: %v", tc.schema, tc.property, tc.valid, err)
				}
			}
			if err := p.VisitJSON(tc.invalid, opts...); err == nil {
				t.Errorf("%s.%s accepts %v", tc.schema, tc.property, tc.invalid)
			}
		}
	}
}

// TestRateLimitHeadersDeclared: every shared response (all the error
// answers, 429 included) declares the four RateLimit header fields, and
// the description states the draft they follow.
func TestRateLimitHeadersDeclared(t *testing.T) {
	doc := load(t)
	names := []string{"RateLimit-Limit", "RateLimit-Remaining", "RateLimit-Reset", "RateLimit-Policy"}
	for name, r := range doc.Components.Responses {
		for _, h := range names {
			if r.Value.Headers[h] == nil {
				t.Errorf("components/responses/%s does not declare %s", name, h)
			}
		}
	}
	if !strings.Contains(doc.Info.Description, "draft-ietf-httpapi-ratelimit-headers-06") {
		t.Error("info.description does not name the RateLimit draft")
	}
}

// TestServers: the document names its server, relative to where it is
// served, so a generated client has a base address.
func TestServers(t *testing.T) {
	doc := load(t)
	if len(doc.Servers) == 0 || doc.Servers[0].URL != "/" {
		t.Errorf("servers = %v, want one relative to the document (/)", doc.Servers)
	}
}

// TestIntegerIDsBounded: every integer that numbers a record (`id`, `seq`,
// `*_id`) is an int64 bounded by 2^53 − 1, the largest integer a JavaScript
// number holds exactly; the database's sequences stop there.
func TestIntegerIDsBounded(t *testing.T) {
	n := 0
	allSchemas(load(t), func(at string, s *openapi3.Schema) {
		for name, p := range s.Properties {
			if !p.Value.Type.Is("integer") || (name != "id" && name != "seq" && !strings.HasSuffix(name, "_id")) {
				continue
			}
			n++
			if p.Value.Format != "int64" || p.Value.Max == nil || *p.Value.Max != 9007199254740991 {
				t.Errorf("%s/%s: integer id without format int64 and maximum 9007199254740991", at, name)
			}
		}
	})
	if n == 0 {
		t.Error("found no integer id; the walk is wrong")
	}
}

// TestRequestBodyExamples: every request body, in every media type, has an
// example, and the example is valid against its schema under kin-openapi
// (a JSON example as JSON decodes it; a CSV one as the non-empty string it is).
func TestRequestBodyExamples(t *testing.T) {
	doc := load(t)
	n := 0
	for _, o := range operations(doc) {
		if o.op.RequestBody == nil {
			continue
		}
		for ct, mt := range o.op.RequestBody.Value.Content {
			n++
			if mt.Example == nil {
				t.Errorf("%s %s: no example", o, ct)
				continue
			}
			v := mt.Example
			if strings.HasSuffix(ct, "json") {
				b, err := json.Marshal(v)
				if err != nil {
					t.Fatalf("%s %s: %v", o, ct, err)
				}
				v = nil
				if err := json.Unmarshal(b, &v); err != nil {
					t.Fatalf("%s %s: %v", o, ct, err)
				}
			}
			if err := mt.Schema.Value.VisitJSON(v, openapi3.MultiErrors()); err != nil {
				t.Errorf("%s %s: the example does not match the schema: %v", o, ct, err)
			}
		}
	}
	if n == 0 {
		t.Error("found no request body; the walk is wrong")
	}
}
