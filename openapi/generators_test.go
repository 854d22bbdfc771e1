package openapi

import (
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

// TestNullableHasType: OpenAPI 3.0.3 gives `nullable: true` a meaning only
// beside a `type` ("A true value adds null to the allowed values if type is
// set explicitly"); without one, linters report an error and some
// generators drop the null. Every nullable schema names its type.
func TestNullableHasType(t *testing.T) {
	n := 0
	allSchemas(load(t), func(at string, s *openapi3.Schema) {
		if !s.Nullable {
			return
		}
		n++
		if s.Type == nil || len(s.Type.Slice()) == 0 {
			t.Errorf("%s: nullable without a type", at)
		}
	})
	if n == 0 {
		t.Error("found no nullable schema; the walk is wrong")
	}
}

// TestNullableReferences: the two nullable references (a schema beside
// allOf of one $ref) accept null and a value of the referenced schema, and
// refuse a value of another type, under kin-openapi (the server's validator).
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
		if err := p.VisitJSON(nil); err != nil {
			t.Errorf("%s.%s refuses null: %v", tc.schema, tc.property, err)
		}
		if tc.valid != nil {
			if err := p.VisitJSON(tc.valid); err != nil {
				t.Errorf("%s.%s refuses %v: %v", tc.schema, tc.property, tc.valid, err)
			}
		}
		if err := p.VisitJSON(tc.invalid); err == nil {
			t.Errorf("%s.%s accepts %v", tc.schema, tc.property, tc.invalid)
		}
	}
}
