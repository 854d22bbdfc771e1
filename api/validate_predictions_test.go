package api

import (
	"encoding/json"
	"fmt"
	"reflect"
	"slices"
	"strings"
	"testing"

	"github.com/getkin/kin-openapi/openapi3"

	"curvekeeper/api/oapi"
)

// specSchema returns a component schema of the embedded spec.
func specSchema(t *testing.T, name string) *openapi3.Schema {
	t.Helper()
	doc, err := oapi.GetSwagger()
	if err != nil {
		t.Fatal(err)
	}
	ref, ok := doc.Components.Schemas[name]
	if !ok || ref.Value == nil {
		t.Fatalf("the spec has no schema %s", name)
	}
	return ref.Value
}

// boundOf is a schema's optional bound, -1 when absent.
func boundOf(p *float64) float64 {
	if p == nil {
		return -1
	}
	return *p
}

// countOf is a schema's optional length or count, -1 when absent.
func countOf(p *uint64) int {
	if p == nil {
		return -1
	}
	return int(*p)
}

func propertyNames(s *openapi3.Schema) []string {
	var names []string
	for k := range s.Properties {
		names = append(names, k)
	}
	slices.Sort(names)
	return names
}

// TestFastPathBoundsMatchSpec: every bound the prediction fast path checks
// is the spec's, read from the embedded document, so that a change of the
// spec fails here until the fast path follows.
func TestFastPathBoundsMatchSpec(t *testing.T) {
	req, sample := specSchema(t, "PredictionRequest"), specSchema(t, "PredictionSample")
	ident, resps, resp := specSchema(t, "Identifier"), specSchema(t, "Responses"), specSchema(t, "Response")
	dil, conf := specSchema(t, "Dilution"), specSchema(t, "Confidence")
	samples := req.Properties["samples"].Value
	f, u := boundOf, countOf
	checks := []struct {
		name      string
		got, want any
	}{
		// monte_carlo is not parsed by the fast path: a body with it falls
		// back to the spec's validator (fastParser refuses unknown members).
		{"PredictionRequest members", propertyNames(req), []string{"confidence", "monte_carlo", "samples"}},
		{"PredictionSample members", propertyNames(sample), []string{"dilution", "id", "responses"}},
		{"PredictionRequest required", req.Required, []string{"samples"}},
		{"PredictionSample required", fmt.Sprint(sample.Required), "[id responses]"},
		{"PredictionRequest closed", req.AdditionalProperties.Has != nil && !*req.AdditionalProperties.Has, true},
		{"PredictionSample closed", sample.AdditionalProperties.Has != nil && !*sample.AdditionalProperties.Has, true},
		{"samples minItems", int(samples.MinItems), 1},
		{"samples maxItems", u(samples.MaxItems), fastSamplesMax},
		{"Identifier pattern", ident.Pattern, "^[A-Za-z0-9][A-Za-z0-9._:-]{0,63}$"},
		{"Identifier maxLength", u(ident.MaxLength), fastIdentifierMax},
		{"Responses minItems", int(resps.MinItems), 1},
		{"Responses maxItems", u(resps.MaxItems), fastResponsesMax},
		{"Response minimum", f(resp.Min), -fastResponseAbsMax},
		{"Response maximum", f(resp.Max), fastResponseAbsMax},
		{"Dilution minimum", dil.Min == nil, true},
		{"Dilution exclusive minimum", f(dil.ExclusiveMin.Value), 0.0},
		{"Dilution maximum", f(dil.Max), fastDilutionMax},
		{"Confidence minimum", f(conf.Min), fastConfidenceMin},
		{"Confidence maximum", f(conf.Max), fastConfidenceMax},
		{"member names", fmt.Sprint(fastMemberNames), "[confidence samples id responses dilution]"},
	}
	for _, c := range checks {
		t.Run(c.name, func(t *testing.T) {
			if fmt.Sprint(c.got) != fmt.Sprint(c.want) {
				t.Errorf("got %v, want %v", c.got, c.want)
			}
		})
	}
}

// specAccepts validates body against the spec's PredictionRequest with
// kin-openapi, as the request validator does.
func specAccepts(t *testing.T, schema *openapi3.Schema, body string) bool {
	t.Helper()
	var v any
	if err := json.Unmarshal([]byte(body), &v); err != nil {
		return false
	}
	return schema.VisitJSON(v) == nil
}

// TestFastPathNeverAcceptsWhatTheSpecRefuses compares the fast path's
// decision on each body with kin-openapi's validation against the spec: the
// fast path may refuse a valid body (the validator then decides), never
// accept an invalid one. The valid bodies must take the fast path, or it
// would be dead code.
func TestFastPathNeverAcceptsWhatTheSpecRefuses(t *testing.T) {
	schema := specSchema(t, "PredictionRequest")
	long := strings.Repeat("a", 64)
	tooLong := strings.Repeat("a", 65)
	many := func(n int, item string) string { return strings.TrimSuffix(strings.Repeat(item+",", n), ",") }
	tests := []struct {
		name string
		body string
		fast bool // the fast path's expected decision
	}{
		{"minimal", `{"samples":[{"id":"S1","responses":[0.5]}]}`, true},
		{"full", `{"confidence":0.99,"samples":[{"id":"S-1.a:b_c","responses":[0.5,-1e15,1e15],"dilution":1e6}]}`, true},
		{"spaces", " {\n\t\"samples\" : [ { \"id\" : \"S1\" , \"responses\" : [ 1 ] } ] }\r\n", true},
		{"64-character id", `{"samples":[{"id":"` + long + `","responses":[1]}]}`, true},
		{"1000 samples", `{"samples":[` + many(1000, `{"id":"S","responses":[1]}`) + `]}`, true},
		{"1000 responses", `{"samples":[{"id":"S","responses":[` + many(1000, "1") + `]}]}`, true},
		{"confidence at bounds", `{"confidence":0.5,"samples":[{"id":"S","responses":[1]}]}`, true},
		{"id that says null", `{"samples":[{"id":"null","responses":[1]}]}`, true},
		{"65-character id", `{"samples":[{"id":"` + tooLong + `","responses":[1]}]}`, false},
		{"id starts with a dot", `{"samples":[{"id":".S","responses":[1]}]}`, false},
		{"id with a space", `{"samples":[{"id":"S 1","responses":[1]}]}`, false},
		{"id not ASCII", `{"samples":[{"id":"Sé","responses":[1]}]}`, false},
		{"empty id", `{"samples":[{"id":"","responses":[1]}]}`, false},
		{"id a number", `{"samples":[{"id":1,"responses":[1]}]}`, false},
		{"id null", `{"samples":[{"id":null,"responses":[1]}]}`, false},
		{"no id", `{"samples":[{"responses":[1]}]}`, false},
		{"no responses", `{"samples":[{"id":"S"}]}`, false},
		{"empty responses", `{"samples":[{"id":"S","responses":[]}]}`, false},
		{"null response", `{"samples":[{"id":"S","responses":[null]}]}`, false},
		{"string response", `{"samples":[{"id":"S","responses":["1"]}]}`, false},
		{"response too large", `{"samples":[{"id":"S","responses":[1.0001e15]}]}`, false},
		{"response overflows", `{"samples":[{"id":"S","responses":[1e400]}]}`, false},
		{"1001 responses", `{"samples":[{"id":"S","responses":[` + many(1001, "1") + `]}]}`, false},
		{"dilution 0", `{"samples":[{"id":"S","responses":[1],"dilution":0}]}`, false},
		{"dilution negative", `{"samples":[{"id":"S","responses":[1],"dilution":-2}]}`, false},
		{"dilution too large", `{"samples":[{"id":"S","responses":[1],"dilution":1000001}]}`, false},
		{"dilution null", `{"samples":[{"id":"S","responses":[1],"dilution":null}]}`, false},
		{"dilution true", `{"samples":[{"id":"S","responses":[1],"dilution":true}]}`, false},
		{"confidence 1", `{"confidence":1,"samples":[{"id":"S","responses":[1]}]}`, false},
		{"confidence 0.4", `{"confidence":0.4,"samples":[{"id":"S","responses":[1]}]}`, false},
		{"confidence null", `{"confidence":null,"samples":[{"id":"S","responses":[1]}]}`, false},
		{"confidence string", `{"confidence":"0.9","samples":[{"id":"S","responses":[1]}]}`, false},
		{"no samples", `{}`, false},
		{"empty samples", `{"samples":[]}`, false},
		{"null samples", `{"samples":null}`, false},
		{"samples an object", `{"samples":{"id":"S","responses":[1]}}`, false},
		{"null sample", `{"samples":[null]}`, false},
		{"1001 samples", `{"samples":[` + many(1001, `{"id":"S","responses":[1]}`) + `]}`, false},
		{"unknown member", `{"samples":[{"id":"S","responses":[1]}],"extra":1}`, false},
		{"unknown sample member", `{"samples":[{"id":"S","responses":[1],"unit":"mg/L"}]}`, false},
		{"member in other case", `{"Samples":[{"id":"S","responses":[1]}]}`, false},
		{"sample member in other case", `{"samples":[{"ID":"S","responses":[1]}]}`, false},
		{"escaped member name", `{"sample\u0073":[{"id":"S","responses":[1]}]}`, false},
		{"member of another level", `{"samples":[{"id":"S","responses":[1]}],"id":"S"}`, false},
		{"sample member at top", `{"samples":[{"id":"S","responses":[1],"samples":[]}]}`, false},
		{"null body", `null`, false},
		{"array body", `[]`, false},
		{"trailing bracket", `{"samples":[{"id":"S","responses":[1]}]}]`, false},
		{"two objects", `{"samples":[{"id":"S","responses":[1]}]} {}`, false},
		{"truncated", `{"samples":[{"id":"S","responses":[1]}`, false},
		{"not JSON", `samples`, false},
		{"duplicate member", `{"samples":[{"id":"S","responses":[1]}],"samples":[{"id":"T","responses":[2]}]}`, false},
		{"duplicate sample member", `{"samples":[{"id":"S","id":"T","responses":[1]}]}`, false},
		{"escaped id", `{"samples":[{"id":"S\u0031","responses":[1]}]}`, false},
		{"number with plus", `{"samples":[{"id":"S","responses":[+1]}]}`, false},
		{"number with leading zero", `{"samples":[{"id":"S","responses":[01]}]}`, false},
		{"number with bare dot", `{"samples":[{"id":"S","responses":[1.]}]}`, false},
		{"number with bare exponent", `{"samples":[{"id":"S","responses":[1e]}]}`, false},
		{"hexadecimal number", `{"samples":[{"id":"S","responses":[0x10]}]}`, false},
		{"negative zero and exponents", `{"samples":[{"id":"S","responses":[-0,1E+2,2.5e-3,-0.0]}]}`, true},
		{"trailing comma", `{"samples":[{"id":"S","responses":[1,]}]}`, false},
		{"missing comma", `{"samples":[{"id":"S" "responses":[1]}]}`, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got := predictionBodyOK([]byte(tc.body))
			if got != tc.fast {
				t.Errorf("predictionBodyOK = %t, want %t", got, tc.fast)
			}
			if got && !specAccepts(t, schema, tc.body) {
				t.Errorf("the fast path accepts a body the spec refuses")
			}
			if !got {
				return
			}
			// The handler receives the fast path's value instead of echo's
			// decode of the same bytes (decode.go): they must agree.
			fast, _ := decodeFastPrediction([]byte(tc.body))
			var want oapi.PredictionRequest
			if err := json.Unmarshal([]byte(tc.body), &want); err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(*fast, want) {
				t.Errorf("fast path decoded %+v, encoding/json %+v", *fast, want)
			}
		})
	}
}

// FuzzFastPathSound: whatever the body, a body the fast path accepts is one
// the spec accepts (kin-openapi) and that encoding/json decodes to the value
// the fast path decoded.
func FuzzFastPathSound(f *testing.F) {
	for _, s := range []string{
		`{"samples":[{"id":"S1","responses":[0.5]}]}`,
		`{"confidence":0.99,"samples":[{"id":"S-1","responses":[0.5,2],"dilution":10}]}`,
		`{"samples":[{"id":"S1","responses":[0.5]}],"x":null}`,
	} {
		f.Add(s)
	}
	schema := func() *openapi3.Schema {
		doc, err := oapi.GetSwagger()
		if err != nil {
			f.Fatal(err)
		}
		return doc.Components.Schemas["PredictionRequest"].Value
	}()
	f.Fuzz(func(t *testing.T, body string) {
		fast, ok := decodeFastPrediction([]byte(body))
		if !ok {
			return
		}
		if !specAccepts(t, schema, body) {
			t.Errorf("the fast path accepts %q, which the spec refuses", body)
		}
		var want oapi.PredictionRequest
		if err := json.Unmarshal([]byte(body), &want); err != nil {
			t.Fatalf("the fast path accepts %q, which encoding/json refuses: %v", body, err)
		}
		if !reflect.DeepEqual(*fast, want) {
			t.Errorf("body %q: fast path decoded %+v, encoding/json %+v", body, *fast, want)
		}
	})
}
