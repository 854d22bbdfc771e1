package api

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"reflect"
	"slices"
	"strings"
	"sync"
	"testing"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/labstack/echo/v4"

	"curvekeeper/api/oapi"
)

// TestRunFastPathMatchesSpec: every bound, pattern and member the run fast
// path checks is the spec's, read from the embedded document (and the
// date-time pattern is kin-openapi's), so that a change of either fails here
// until the fast path follows.
func TestRunFastPathMatchesSpec(t *testing.T) {
	doc, err := oapi.GetSwagger()
	if err != nil {
		t.Fatal(err)
	}
	run, std, smp := specSchema(t, "RunRequest"), specSchema(t, "StandardInput"), specSchema(t, "RunSampleInput")
	op, conc := specSchema(t, "Operator"), specSchema(t, "Concentration")
	standards, samples := run.Properties["standards"].Value, run.Properties["samples"].Value
	acquired := run.Properties["acquired_at"].Value
	createRun := doc.Paths.Find("/v1/runs").Post
	var params []string
	var idem *openapi3.Schema
	var idemRequired bool
	for _, p := range createRun.Parameters {
		params = append(params, p.Value.In+":"+p.Value.Name)
		if p.Value.Name == headerIdempotencyKey {
			idem, idemRequired = p.Value.Schema.Value, p.Value.Required
		}
	}
	var contentTypes []string
	for ct := range createRun.RequestBody.Value.Content {
		contentTypes = append(contentTypes, ct)
	}
	slices.Sort(contentTypes)
	refs := func(s *openapi3.Schema) string {
		var out []string
		for _, name := range propertyNames(s) {
			out = append(out, name+"="+strings.TrimPrefix(s.Properties[name].Ref, "#/components/schemas/"))
		}
		return strings.Join(out, " ")
	}
	f, u := boundOf, countOf
	closed := func(s *openapi3.Schema) bool {
		return s.AdditionalProperties.Has != nil && !*s.AdditionalProperties.Has
	}
	checks := []struct {
		name      string
		got, want any
	}{
		// standard_materials is not read by the fast path: a body with it
		// gives up there (an unknown member) and goes to the validator.
		{"RunRequest members", refs(run), "acquired_at= instrument=Identifier method=Identifier operator=Operator samples= sequence=RunSequenceInput standard_materials= standards="},
		{"StandardInput members", refs(std), "analyte=Identifier concentration=Concentration is_responses= level=Identifier responses=Responses"},
		{"RunSampleInput members", refs(smp), "analyte=Identifier dilution=Dilution dry_fraction= final_volume= final_volume_unit=Unit id=Identifier is_responses= responses=Responses sample_amount= sample_amount_unit=Unit"},
		{"RunRequest required", run.Required, []string{"method", "instrument", "acquired_at", "standards"}},
		{"StandardInput required", std.Required, []string{"analyte", "level", "concentration", "responses"}},
		{"RunSampleInput required", smp.Required, []string{"id", "analyte", "responses"}},
		{"RunRequest closed", closed(run), true},
		{"StandardInput closed", closed(std), true},
		{"RunSampleInput closed", closed(smp), true},
		{"standards items", strings.TrimPrefix(standards.Items.Ref, "#/components/schemas/"), "StandardInput"},
		{"standards minItems", int(standards.MinItems), 1},
		{"standards maxItems", u(standards.MaxItems), fastStandardsMax},
		{"samples items", strings.TrimPrefix(samples.Items.Ref, "#/components/schemas/"), "RunSampleInput"},
		{"samples minItems", int(samples.MinItems), 0},
		{"samples maxItems", u(samples.MaxItems), fastRunSamplesMax},
		{"acquired_at", fmt.Sprintf("%v %s %q", acquired.Type.Slice(), acquired.Format, acquired.Pattern), `[string] date-time ""`},
		{"kin-openapi's date-time pattern", openapi3.FormatOfStringDateTime,
			`^[0-9]{4}-(0[1-9]|10|11|12)-(0[1-9]|[12][0-9]|3[01])T([0-1][0-9]|2[0-3]):[0-5][0-9]:([0-5][0-9]|60)(\.[0-9]+)?(Z|(\+|-)([0-1][0-9]|2[0-3]):[0-5][0-9])$`},
		{"Operator pattern", op.Pattern, "^[A-Za-z0-9][A-Za-z0-9._:@-]{0,127}$"},
		{"Operator maxLength", u(op.MaxLength), fastOperatorMax},
		{"Concentration minimum", f(conc.Min), 0.0},
		{"Concentration minimum inclusive", conc.ExclusiveMin.IsSet(), false},
		{"Concentration maximum", f(conc.Max), fastConcentrationMax},
		{"Concentration maximum inclusive", conc.ExclusiveMax.IsSet(), false},
		{"createRun parameters", params, []string{"header:Idempotency-Key", "query:method", "query:instrument", "query:acquired_at", "query:operator"}},
		{"Idempotency-Key optional", idemRequired, false},
		{"Idempotency-Key pattern", idem.Pattern, "^[A-Za-z0-9._:-]{1,128}$"},
		{"Idempotency-Key maxLength", u(idem.MaxLength), fastIdemKeyMax},
		{"createRun body required", createRun.RequestBody.Value.Required, true},
		{"createRun content types", contentTypes, []string{"application/json", "text/csv"}},
		{"member names", fmt.Sprint(fastRunMemberNames), "[method instrument acquired_at operator standards samples analyte level concentration id responses dilution]"},
	}
	for _, c := range checks {
		t.Run(c.name, func(t *testing.T) {
			if fmt.Sprint(c.got) != fmt.Sprint(c.want) {
				t.Errorf("got %v, want %v", c.got, c.want)
			}
		})
	}
	// A default anywhere in the body's schema would make the validator write
	// it into the body, and a "null" type would admit null: the fast path does
	// neither, so neither may appear.
	for _, s := range []*openapi3.Schema{run, std, smp} {
		for _, name := range propertyNames(s) {
			v := s.Properties[name].Value
			if v.Default != nil || v.Type.IncludesNull() || (v.Items != nil && (v.Items.Value.Default != nil || v.Items.Value.Type.IncludesNull())) {
				t.Errorf("member %s has a default or is nullable", name)
			}
		}
	}
	// encoding/json matches member names without case: no two names of
	// one object may then differ only in case.
	for _, s := range []*openapi3.Schema{run, std, smp} {
		seen := map[string]bool{}
		for _, name := range propertyNames(s) {
			if seen[strings.ToLower(name)] {
				t.Errorf("members differ only in case: %s", name)
			}
			seen[strings.ToLower(name)] = true
		}
	}
}

// runCase is one POST /v1/runs request.
type runCase struct {
	body   string
	ct     string   // Content-Type; "" means application/json
	query  string   // raw query
	keys   []string // Idempotency-Key values
	noKeys bool     // send no Idempotency-Key at all (else keys, or one valid key)
}

func (rc runCase) request() *http.Request {
	target := "/v1/runs"
	if rc.query != "" {
		target += "?" + rc.query
	}
	req := httptest.NewRequest(http.MethodPost, target, strings.NewReader(rc.body))
	ct := rc.ct
	if ct == "" {
		ct = echo.MIMEApplicationJSON
	}
	req.Header.Set(echo.HeaderContentType, ct)
	switch {
	case rc.noKeys:
	case rc.keys != nil:
		req.Header[headerIdempotencyKey] = rc.keys
	default:
		req.Header.Set(headerIdempotencyKey, "b7f0c6e2-6a55-4f7e-9a3c-3c2b1f1d9e01")
	}
	return req
}

// runDecision is the run fast path's decision on a request and, when it
// accepts, the run it decoded; and the spec validator's decision on the same
// request with, when it accepts, what echo's binder decodes from the body
// (what the handler got before the fast path).
type runDecision struct {
	fast    bool
	fastRun *oapi.RunRequest
	specErr error
	echoRun *oapi.RunRequest // nil when the binder refused what the spec accepted
}

func runDecisions(t testing.TB, spec *specValidator, rc runCase) runDecision {
	t.Helper()
	var d runDecision
	e := echo.New()
	c := e.NewContext(rc.request(), httptest.NewRecorder())
	run, fast, err := runFastPath(c)
	if err != nil {
		t.Fatalf("runFastPath: %v", err)
	}
	if d.fast = fast; fast {
		d.fastRun = run
	}
	// The body the fast path put back is the body it read.
	if back, err := io.ReadAll(c.Request().Body); err != nil || string(back) != rc.body {
		t.Fatalf("the fast path put back %q (%v), not the body", back, err)
	}
	c = e.NewContext(rc.request(), httptest.NewRecorder())
	if d.specErr = spec.validate(c); d.specErr == nil {
		var v oapi.RunRequest
		if (&echo.DefaultBinder{}).BindBody(c, &v) == nil {
			d.echoRun = &v
		}
	}
	return d
}

// CheckRunFastPath fails t if the run fast path accepts the body (with
// that Idempotency-Key; none when empty) while the spec validator refuses
// it, or decodes it other than echo's binder (and encoding/json) would; it
// reports whether the fast path accepted. FuzzRunFastPathSound
// (fuzz_test.go) checks it on every body it makes.
func CheckRunFastPath(t *testing.T, body []byte, idempotencyKey string) bool {
	t.Helper()
	rc := runCase{body: string(body), keys: []string{idempotencyKey}}
	if idempotencyKey == "" {
		rc.keys, rc.noKeys = nil, true
	}
	testSpecOnce.Do(func() { testSpec = newTestSpecValidator(t) })
	return checkRunCase(t, testSpec, rc)
}

// testSpec is the spec validator CheckRunFastPath asks, built once: the
// router takes longer to build than a fuzz input to check.
var (
	testSpecOnce sync.Once
	testSpec     *specValidator
)

func checkRunCase(t testing.TB, spec *specValidator, rc runCase) bool {
	t.Helper()
	d := runDecisions(t, spec, rc)
	if !d.fast {
		return false
	}
	if d.specErr != nil {
		t.Fatalf("the fast path accepts %+v, which the spec refuses: %v", rc, d.specErr)
	}
	if d.echoRun == nil {
		t.Fatalf("the fast path accepts %+v, which echo's binder cannot decode", rc)
	}
	if !reflect.DeepEqual(d.fastRun, d.echoRun) {
		t.Fatalf("body %q: the fast path decoded %+v, echo's binder %+v", rc.body, *d.fastRun, *d.echoRun)
	}
	var strict oapi.RunRequest
	if err := json.Unmarshal([]byte(rc.body), &strict); err != nil || !reflect.DeepEqual(*d.fastRun, strict) {
		t.Fatalf("body %q: the fast path decoded %+v, json.Unmarshal %+v (%v)", rc.body, *d.fastRun, strict, err)
	}
	return true
}

func newTestSpecValidator(t testing.TB) *specValidator {
	t.Helper()
	doc, err := oapi.GetSwagger()
	if err != nil {
		t.Fatal(err)
	}
	v, err := newSpecValidator(doc)
	if err != nil {
		t.Fatal(err)
	}
	return v
}

// TestRunFastPathNeverAcceptsWhatTheSpecRefuses compares, request by
// request, the run fast path's decision with the spec validator's (the
// middleware's answer without the fast path): the fast path may refuse a
// valid request (the validator then decides), never accept an invalid one,
// and what it accepts it decodes as echo's binder did. The spec's decision
// is asserted too, so that the table says where the fast path leaves valid
// requests to the validator.
func TestRunFastPathNeverAcceptsWhatTheSpecRefuses(t *testing.T) {
	spec := newTestSpecValidator(t)
	const base = `{"method":"nitrate-uv","instrument":"photometer-7","acquired_at":"2026-03-02T08:00:00Z",` +
		`"standards":[{"analyte":"nitrate","level":"L1","concentration":0.5,"responses":[0.0102,0.0098]}]}`
	with := func(old, new string) string {
		if !strings.Contains(base, old) {
			t.Fatalf("base has no %q", old)
		}
		return strings.Replace(base, old, new, 1)
	}
	at := func(s string) string { return with(`"2026-03-02T08:00:00Z"`, `"`+s+`"`) }
	conc := func(s string) string { return with(`"concentration":0.5`, `"concentration":`+s) }
	resp := func(s string) string { return with(`"responses":[0.0102,0.0098]`, `"responses":`+s) }
	extra := func(s string) string { return with(`}]}`, `}]`+s+`}`) }         // members after standards
	std := func(s string) string { return with(`0.0098]}`, `0.0098]`+s+`}`) } // members of the standard
	sample := func(s string) string { return extra(`,"samples":[` + s + `]`) }
	many := func(n int, item string) string { return strings.TrimSuffix(strings.Repeat(item+",", n), ",") }
	stds := func(n int) string {
		var b strings.Builder
		for i := range n {
			if i > 0 {
				b.WriteByte(',')
			}
			fmt.Fprintf(&b, `{"analyte":"nitrate","level":"L%d","concentration":%d,"responses":[%d]}`, i, i, i)
		}
		return `{"method":"m","instrument":"i","acquired_at":"2026-03-02T08:00:00Z","standards":[` + b.String() + `]}`
	}
	id64, id65 := strings.Repeat("a", 64), strings.Repeat("a", 65)
	op128, op129 := "a@"+strings.Repeat("b", 126), "a@"+strings.Repeat("b", 127)
	tests := []struct {
		name       string
		rc         runCase
		fast, spec bool
	}{
		// Accepted by both.
		{"minimal", runCase{body: base}, true, true},
		{"no Idempotency-Key", runCase{body: base, noKeys: true}, true, true},
		{"128-character Idempotency-Key", runCase{body: base, keys: []string{strings.Repeat("k", 128)}}, true, true},
		{"charset parameter", runCase{body: base, ct: "application/json; charset=utf-8"}, true, true},
		{"128-character operator", runCase{body: extra(`,"operator":"` + op128 + `"`)}, true, true},
		{"samples", runCase{body: sample(`{"id":"W-1","analyte":"nitrate","responses":[0.02]},{"id":"W-2","analyte":"nitrate","responses":[-1e15,1e15],"dilution":1e6}`)}, true, true},
		{"empty samples", runCase{body: sample(``)}, true, true},
		{"members in another order", runCase{body: `{"standards":[{"responses":[1],"concentration":1,"level":"L","analyte":"a"}],"acquired_at":"2026-03-02T08:00:00Z","instrument":"i","method":"m"}`}, true, true},
		{"white space", runCase{body: " {\n\t\"method\" : \"m\" ,\r\n\"instrument\":\"i\",\"acquired_at\":\"2026-03-02T08:00:00Z\",\"standards\":[ {\"analyte\":\"a\",\"level\":\"L\",\"concentration\":1,\"responses\":[ 1 , 2 ]} ] }\n"}, true, true},
		{"64-character identifiers", runCase{body: strings.ReplaceAll(base, `"nitrate"`, `"`+id64+`"`)}, true, true},
		{"identifier that says null", runCase{body: with(`"photometer-7"`, `"null"`)}, true, true},
		{"concentration 0", runCase{body: conc("0")}, true, true},
		{"concentration -0", runCase{body: conc("-0")}, true, true},
		{"concentration 1e12", runCase{body: conc("1E+12")}, true, true},
		{"1000 responses", runCase{body: resp("[" + many(1000, "1.5e-3") + "]")}, true, true},
		{"1000 standards", runCase{body: stds(1000)}, true, true},
		{"1000 samples", runCase{body: sample(many(1000, `{"id":"W","analyte":"nitrate","responses":[1]}`))}, true, true},
		{"fraction of a second", runCase{body: at("2026-03-02T08:00:00.123456789123Z")}, true, true},
		{"offset", runCase{body: at("2026-03-02T08:00:00+05:30")}, true, true},
		{"negative offset", runCase{body: at("2026-03-02T23:59:59.5-23:59")}, true, true},
		{"leap day", runCase{body: at("2024-02-29T00:00:00Z")}, true, true},
		{"year 0", runCase{body: at("0000-01-01T00:00:00Z")}, true, true},

		// Valid, left to the validator.
		{"lower-case t and z (RFC 3339 section 5.6)", runCase{body: at("2026-03-02t08:00:00z")}, false, true},
		{"escaped identifier", runCase{body: with(`"photometer-7"`, `"photometer\u002d7"`)}, false, true},
		{"duplicate member (the last wins)", runCase{body: with(`"method":"nitrate-uv"`, `"method":"x","method":"nitrate-uv"`)}, false, specAcceptsDuplicateNames},
		{"duplicate standard member", runCase{body: std(`,"level":"L2"`)}, false, specAcceptsDuplicateNames},
		{"trailing data (malformed: 400)", runCase{body: base + ` {}`}, false, false},
		{"query parameter", runCase{body: base, query: "method=m"}, false, true},
		{"empty query", runCase{body: base, query: "&"}, false, true},
		{"media type in capitals", runCase{body: base, ct: "Application/JSON"}, false, true},
		{"CSV content type", runCase{body: base, ct: "text/csv"}, false, true},

		// Refused by both.
		{"no method", runCase{body: with(`"method":"nitrate-uv",`, ``)}, false, false},
		{"no instrument", runCase{body: with(`"instrument":"photometer-7",`, ``)}, false, false},
		{"no acquired_at", runCase{body: with(`"acquired_at":"2026-03-02T08:00:00Z",`, ``)}, false, false},
		{"no standards", runCase{body: `{"method":"m","instrument":"i","acquired_at":"2026-03-02T08:00:00Z"}`}, false, false},
		{"empty standards", runCase{body: with(base[strings.Index(base, `[`):], `[]}`)}, false, false},
		{"1001 standards", runCase{body: stds(1001)}, false, false},
		{"1001 samples", runCase{body: sample(many(1001, `{"id":"W","analyte":"nitrate","responses":[1]}`))}, false, false},
		{"no level", runCase{body: with(`"level":"L1",`, ``)}, false, false},
		{"no concentration", runCase{body: with(`"concentration":0.5,`, ``)}, false, false},
		{"no responses", runCase{body: with(`,"responses":[0.0102,0.0098]`, ``)}, false, false},
		{"sample without analyte", runCase{body: sample(`{"id":"W","responses":[1]}`)}, false, false},
		{"sample without id", runCase{body: sample(`{"analyte":"nitrate","responses":[1]}`)}, false, false},
		{"sample without responses", runCase{body: sample(`{"id":"W","analyte":"nitrate"}`)}, false, false},
		{"unknown member", runCase{body: extra(`,"unit":"mg/L"`)}, false, false},
		{"unknown standard member", runCase{body: std(`,"unit":"mg/L"`)}, false, false},
		{"unknown sample member", runCase{body: sample(`{"id":"W","analyte":"nitrate","responses":[1],"level":"L1"}`)}, false, false},
		{"member in other case", runCase{body: with(`"method"`, `"Method"`)}, false, false},
		{"standard member in other case", runCase{body: with(`"level"`, `"LEVEL"`)}, false, false},
		{"65-character method", runCase{body: with(`"nitrate-uv"`, `"`+id65+`"`)}, false, false},
		{"65-character level", runCase{body: with(`"L1"`, `"`+id65+`"`)}, false, false},
		{"empty instrument", runCase{body: with(`"photometer-7"`, `""`)}, false, false},
		{"analyte with a space", runCase{body: with(`"analyte":"nitrate"`, `"analyte":"nitrate N"`)}, false, false},
		{"analyte starting with a dot", runCase{body: with(`"analyte":"nitrate"`, `"analyte":".nitrate"`)}, false, false},
		{"identifier with @", runCase{body: with(`"photometer-7"`, `"photometer@7"`)}, false, false},
		{"identifier not ASCII", runCase{body: with(`"photometer-7"`, `"photomètre-7"`)}, false, false},
		{"identifier not UTF-8", runCase{body: with(`"photometer-7"`, "\"photometer-\xff\"")}, false, false},
		{"sample id with a control character", runCase{body: sample(`{"id":"W\u0000","analyte":"nitrate","responses":[1]}`)}, false, false},
		{"129-character operator", runCase{body: extra(`,"operator":"` + op129 + `"`)}, false, false},
		{"operator starting with @", runCase{body: extra(`,"operator":"@lab"`)}, false, false},
		{"operator null", runCase{body: extra(`,"operator":null`)}, false, false},
		{"samples null", runCase{body: extra(`,"samples":null`)}, false, false},
		{"standards an object", runCase{body: with(base[strings.Index(base, `[`):], `{"analyte":"a","level":"L","concentration":1,"responses":[1]}}`)}, false, false},
		{"null standard", runCase{body: with(base[strings.Index(base, `[`):], `[null]}`)}, false, false},
		{"method a number", runCase{body: with(`"nitrate-uv"`, `12`)}, false, false},
		{"negative concentration", runCase{body: conc("-1e-300")}, false, false},
		{"concentration over 1e12", runCase{body: conc("1000000000001")}, false, false},
		{"concentration a string", runCase{body: conc(`"0.5"`)}, false, false},
		{"concentration NaN", runCase{body: conc(`NaN`)}, false, false},
		{"concentration overflows", runCase{body: conc("1e400")}, false, false},
		{"empty responses", runCase{body: resp("[]")}, false, false},
		{"1001 responses", runCase{body: resp("[" + many(1001, "1") + "]")}, false, false},
		{"response over 1e15", runCase{body: resp("[1.0000000000001e15]")}, false, false},
		{"null response", runCase{body: resp("[null]")}, false, false},
		{"dilution 0", runCase{body: sample(`{"id":"W","analyte":"nitrate","responses":[1],"dilution":0}`)}, false, false},
		{"dilution over 1e6", runCase{body: sample(`{"id":"W","analyte":"nitrate","responses":[1],"dilution":1000000.5}`)}, false, false},
		{"dilution null", runCase{body: sample(`{"id":"W","analyte":"nitrate","responses":[1],"dilution":null}`)}, false, false},
		{"not a leap year", runCase{body: at("2025-02-29T08:00:00Z")}, false, false},
		{"April 31", runCase{body: at("2026-04-31T08:00:00Z")}, false, false},
		{"month 13", runCase{body: at("2026-13-02T08:00:00Z")}, false, false},
		{"month 00", runCase{body: at("2026-00-02T08:00:00Z")}, false, false},
		{"day 00", runCase{body: at("2026-03-00T08:00:00Z")}, false, false},
		{"day 32", runCase{body: at("2026-03-32T08:00:00Z")}, false, false},
		{"hour 24", runCase{body: at("2026-03-02T24:00:00Z")}, false, false},
		{"minute 60", runCase{body: at("2026-03-02T08:60:00Z")}, false, false},
		{"second 61", runCase{body: at("2026-03-02T08:00:61Z")}, false, false},
		{"leap second (not storable: 422)", runCase{body: at("2016-12-31T23:59:60Z")}, false, false},
		{"space for T", runCase{body: at("2026-03-02 08:00:00Z")}, false, false},
		{"no zone", runCase{body: at("2026-03-02T08:00:00")}, false, false},
		{"no seconds", runCase{body: at("2026-03-02T08:00Z")}, false, false},
		{"bare dot", runCase{body: at("2026-03-02T08:00:00.Z")}, false, false},
		{"comma for dot", runCase{body: at("2026-03-02T08:00:00,5Z")}, false, false},
		{"offset hour 24", runCase{body: at("2026-03-02T08:00:00+24:00")}, false, false},
		{"offset without colon", runCase{body: at("2026-03-02T08:00:00+0530")}, false, false},
		{"date only", runCase{body: at("2026-03-02")}, false, false},
		{"five-digit year", runCase{body: at("12026-03-02T08:00:00Z")}, false, false},
		{"acquired_at a number", runCase{body: with(`"2026-03-02T08:00:00Z"`, `1772438400`)}, false, false},
		{"invalid Idempotency-Key", runCase{body: base, keys: []string{"a b"}}, false, false},
		{"129-character Idempotency-Key", runCase{body: base, keys: []string{strings.Repeat("k", 129)}}, false, false},
		{"empty Idempotency-Key", runCase{body: base, keys: []string{""}}, false, false},
		{"empty body", runCase{body: ""}, false, false},
		{"null body", runCase{body: "null"}, false, false},
		{"array body", runCase{body: "[" + base + "]"}, false, false},
		{"byte-order mark", runCase{body: "\ufeff" + base}, false, false},
		{"truncated", runCase{body: base[:len(base)-1]}, false, false},
		{"trailing comma", runCase{body: with(`0.0098]`, `0.0098,]`)}, false, false},
		{"number with plus", runCase{body: conc("+1")}, false, false},
		{"number with leading zero", runCase{body: conc("01")}, false, false},
		{"number with bare exponent", runCase{body: conc("1e")}, false, false},
		{"escaped member name", runCase{body: with(`"method"`, `"m\u0065thod"`)}, false, true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			d := runDecisions(t, spec, tc.rc)
			if d.fast != tc.fast {
				t.Errorf("fast path %t, want %t", d.fast, tc.fast)
			}
			if (d.specErr == nil) != tc.spec {
				t.Errorf("spec validator accepts: %t, want %t (%v)", d.specErr == nil, tc.spec, d.specErr)
			}
			checkRunCase(t, spec, tc.rc)
		})
	}
}

// TestRunFastPathKeepsReadErrors: a body whose reading fails (over the body
// limit, a broken connection) reaches the validator with the bytes read and
// then the same error, as it did without the fast path.
func TestRunFastPathKeepsReadErrors(t *testing.T) {
	broken := errors.New("connection reset")
	req := httptest.NewRequest(http.MethodPost, "/v1/runs", io.MultiReader(strings.NewReader(`{"method":`), errReader{broken}))
	req.Header.Set(echo.HeaderContentType, echo.MIMEApplicationJSON)
	c := echo.New().NewContext(req, httptest.NewRecorder())
	if _, ok, err := runFastPath(c); ok || err != nil {
		t.Fatalf("runFastPath = %t, %v; want false, nil", ok, err)
	}
	got, err := io.ReadAll(c.Request().Body)
	if string(got) != `{"method":` || !errors.Is(err, broken) {
		t.Errorf("the validator would read %q, %v; want the bytes read, then %v", got, err, broken)
	}
	var mbe *http.MaxBytesError
	limited := httptest.NewRequest(http.MethodPost, "/v1/runs", bytes.NewReader(make([]byte, 100)))
	limited.Header.Set(echo.HeaderContentType, echo.MIMEApplicationJSON)
	limited.Body = http.MaxBytesReader(httptest.NewRecorder(), limited.Body, 10)
	c = echo.New().NewContext(limited, httptest.NewRecorder())
	if _, ok, err := runFastPath(c); ok || err != nil {
		t.Fatalf("runFastPath = %t, %v; want false, nil", ok, err)
	}
	if got, err := io.ReadAll(c.Request().Body); len(got) != 10 || !errors.As(err, &mbe) {
		t.Errorf("the validator would read %d bytes, %v; want 10, then the limit's error", len(got), err)
	}
}
