package api_test

import (
	"encoding/json"
	"fmt"
	"net/http"
	"strings"
	"testing"

	"curvekeeper/api"
)

// validRun is the JSON of a run the service accepts; the cases below break
// it one way at a time.
func validRun(t testing.TB) map[string]any {
	t.Helper()
	var m map[string]any
	if err := json.Unmarshal(mustJSON(t, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))), &m); err != nil {
		t.Fatal(err)
	}
	return m
}

// mutate returns validRun changed by f, as JSON.
func mutate(t testing.TB, f func(m map[string]any)) []byte {
	t.Helper()
	m := validRun(t)
	f(m)
	return mustJSON(t, m)
}

func std(m map[string]any, i int) map[string]any {
	return m["standards"].([]any)[i].(map[string]any)
}

// rawRun splices a raw JSON value for concentration of standard 0 into an
// otherwise valid run, for values encoding/json cannot produce.
func rawRun(t testing.TB, field, raw string) []byte {
	t.Helper()
	b := string(mutate(t, func(m map[string]any) { std(m, 0)[field] = "@@RAW@@" }))
	return []byte(strings.Replace(b, `"@@RAW@@"`, raw, 1))
}

type badCase struct {
	name        string
	method      string // POST when empty
	path        string // /v1/runs when empty
	contentType string // application/json when empty
	body        []byte
	header      map[string]string
	unrouted    bool
	status      int
	pointer     string // a field the problem must name; "" when none applies
}

// TestBadInputRefusedAndNothingStored sends input the spec rejects and
// expects a 4xx problem naming the field, with no row written anywhere.
func TestBadInputRefusedAndNothingStored(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	curve := "/v1/curves/" + e.run(t, e.admin, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))).Curves[0].ID.String()
	csvHead := "kind,analyte,level,concentration,response,sample_id,dilution\n"
	csvOK, _ := nitrateCSV(3)
	csvPathOK := csvPath("nitrate-uv", "photometer-7", "2026-03-02T08:00:00Z")
	huge := make([]float64, 100000)
	for i := range huge {
		huge[i] = 1.5
	}
	pred := func(v any) []byte { return mustJSON(t, v) }

	cases := []badCase{
		// Syntax and types: 400.
		{name: "malformed JSON", body: []byte(`{"method": "nitrate-uv", "standards": [`), status: 400},
		{name: "empty body", body: []byte{}, status: 400},
		{name: "JSON array, not object", body: []byte(`[1,2,3]`), status: 400},
		{name: "concentration as string", body: mutate(t, func(m map[string]any) { std(m, 0)["concentration"] = "0.5" }), status: 400, pointer: "/standards/0/concentration"},
		{name: "responses as number", body: mutate(t, func(m map[string]any) { std(m, 1)["responses"] = 1.0 }), status: 400, pointer: "/standards/1/responses"},
		{name: "method as number", body: mutate(t, func(m map[string]any) { m["method"] = 7 }), status: 400, pointer: "/method"},
		{name: "NaN as string", body: mutate(t, func(m map[string]any) { std(m, 0)["responses"] = []any{"NaN", 0.3} }), status: 400, pointer: "/standards/0/responses/0"},
		{name: "Infinity as string", body: mutate(t, func(m map[string]any) { std(m, 2)["concentration"] = "Infinity" }), status: 400, pointer: "/standards/2/concentration"},
		{name: "NaN as bare token", body: rawRun(t, "concentration", "NaN"), status: 400},
		{name: "Infinity as bare token", body: rawRun(t, "concentration", "Infinity"), status: 400},
		{name: "1e999 overflows", body: rawRun(t, "concentration", "1e999"), status: 400},
		{name: "1e308 concentration", body: rawRun(t, "concentration", "1e308"), status: 400, pointer: "/standards/0/concentration"},
		{name: "-1e308 response", body: mutate(t, func(m map[string]any) { std(m, 0)["responses"] = []any{-1e308} }), status: 400, pointer: "/standards/0/responses/0"},
		{name: "negative concentration", body: mutate(t, func(m map[string]any) { std(m, 3)["concentration"] = -0.5 }), status: 400, pointer: "/standards/3/concentration"},
		{name: "unknown top-level field", body: mutate(t, func(m map[string]any) { m["priority"] = "high" }), status: 400},
		{name: "unknown standard field", body: mutate(t, func(m map[string]any) { std(m, 0)["colour"] = "blue" }), status: 400},
		{name: "missing acquired_at", body: mutate(t, func(m map[string]any) { delete(m, "acquired_at") }), status: 400},
		{name: "missing responses", body: mutate(t, func(m map[string]any) { delete(std(m, 0), "responses") }), status: 400},
		{name: "acquired_at not a time", body: mutate(t, func(m map[string]any) { m["acquired_at"] = "last tuesday" }), status: 400, pointer: "/acquired_at"},
		{name: "empty standards", body: mutate(t, func(m map[string]any) { m["standards"] = []any{} }), status: 400, pointer: "/standards"},
		{name: "empty responses", body: mutate(t, func(m map[string]any) { std(m, 0)["responses"] = []any{} }), status: 400, pointer: "/standards/0/responses"},
		{name: "100,000 readings in one standard", body: mutate(t, func(m map[string]any) { std(m, 0)["responses"] = huge }), status: 400, pointer: "/standards/0/responses"},
		{name: "zero sample dilution", body: mutate(t, func(m map[string]any) {
			m["samples"] = []any{map[string]any{"id": "W-1", "analyte": "nitrate", "responses": []any{1.0}, "dilution": 0}}
		}), status: 400, pointer: "/samples/0/dilution"},
		{name: "control character in instrument", body: mutate(t, func(m map[string]any) { m["instrument"] = "photo\x01meter" }), status: 400, pointer: "/instrument"},
		{name: "newline in level", body: mutate(t, func(m map[string]any) { std(m, 0)["level"] = "L1\nL2" }), status: 400, pointer: "/standards/0/level"},
		{name: "unicode in analyte", body: mutate(t, func(m map[string]any) { std(m, 0)["analyte"] = "nitrát" }), status: 400, pointer: "/standards/0/analyte"},
		{name: "SQL in instrument", body: mutate(t, func(m map[string]any) { m["instrument"] = "x'; DROP TABLE runs; --" }), status: 400, pointer: "/instrument"},
		{name: "SQL in method", body: mutate(t, func(m map[string]any) { m["method"] = "nitrate-uv' OR '1'='1" }), status: 400, pointer: "/method"},
		{name: "SQL in operator", body: mutate(t, func(m map[string]any) { m["operator"] = "a\"); DELETE FROM audit;--" }), status: 400, pointer: "/operator"},
		{name: "65-character identifier", body: mutate(t, func(m map[string]any) { m["instrument"] = strings.Repeat("p", 65) }), status: 400, pointer: "/instrument"},
		{name: "query parameters with JSON", path: csvPathOK, body: mutate(t, func(map[string]any) {}), status: 400, pointer: "query:method"},
		{name: "malformed Idempotency-Key", body: mutate(t, func(map[string]any) {}), header: map[string]string{"Idempotency-Key": "two words"}, status: 400, pointer: "header:Idempotency-Key"},
		// Rules of the service: 422.
		{name: "analyte the method does not list", body: mutate(t, func(m map[string]any) { std(m, 2)["analyte"] = "arsenic" }), status: 422, pointer: "/standards/2/analyte"},
		{name: "unknown method", body: mutate(t, func(m map[string]any) { m["method"] = "sulfate-ic" }), status: 422, pointer: "/method"},
		{name: "duplicate level", body: mutate(t, func(m map[string]any) { std(m, 4)["level"] = "L2" }), status: 422, pointer: "/standards/4/level"},
		{name: "two levels share a concentration", body: mutate(t, func(m map[string]any) { std(m, 4)["concentration"] = 1.0 }), status: 422, pointer: "/standards/4/concentration"},
		{name: "sample id twice for one analyte", body: mutate(t, func(m map[string]any) {
			m["samples"] = []any{map[string]any{"id": "W-1", "analyte": "nitrate", "responses": []any{1.0}},
				map[string]any{"id": "W-1", "analyte": "nitrate", "responses": []any{2.0}}}
		}), status: 422, pointer: "/samples/1/id"},
		{name: "sample of an analyte without standards", body: mutate(t, func(m map[string]any) {
			m["samples"] = []any{map[string]any{"id": "W-1", "analyte": "phosphate", "responses": []any{1.0}}}
		}), status: 422, pointer: "/samples/0/analyte"},
		// Content type and routes.
		{name: "text/plain", contentType: "text/plain", body: mutate(t, func(map[string]any) {}), status: 415},
		{name: "form encoded", contentType: "application/x-www-form-urlencoded", body: []byte("method=nitrate-uv"), status: 415},
		{name: "unknown route", method: http.MethodGet, path: "/v1/calibrations", unrouted: true, status: 404},
		{name: "unknown route outside v1", method: http.MethodGet, path: "/admin.php", unrouted: true, status: 404},
		{name: "method not allowed", method: http.MethodPut, path: "/v1/runs", unrouted: true, status: 405},
		// CSV.
		{name: "CSV without query parameters", contentType: "text/csv", body: []byte(csvOK), status: 400, pointer: "query:method"},
		{name: "CSV missing a column", path: csvPathOK, contentType: "text/csv", body: []byte("kind,analyte,level,response\nstandard,nitrate,L1,0.27\n"), status: 422},
		{name: "CSV NaN response", path: csvPathOK, contentType: "text/csv", body: []byte(csvHead + "standard,nitrate,L1,0.5,NaN,,\n"), status: 422, pointer: "/lines/2/response"},
		{name: "CSV negative concentration", path: csvPathOK, contentType: "text/csv", body: []byte(csvHead + "standard,nitrate,L1,-1,0.3,,\n"), status: 422, pointer: "/lines/2/concentration"},
		{name: "CSV oversized line", path: csvPathOK, contentType: "text/csv", body: []byte(csvHead + "standard,nitrate," + strings.Repeat("L", 5000) + ",0.5,0.3,,\n"), status: 422},
		{name: "CSV unknown analyte", path: csvPathOK, contentType: "text/csv", body: []byte(csvHead + "standard,arsenic,L1,0.5,0.3,,\n"), status: 422, pointer: "/lines/2/analyte"},
		// Other routes.
		{name: "prediction without samples", path: curve + "/predictions", body: pred(map[string]any{"samples": []any{}}), status: 400, pointer: "/samples"},
		{name: "prediction confidence 1.5", path: curve + "/predictions", body: pred(map[string]any{"confidence": 1.5, "samples": []any{map[string]any{"id": "W", "responses": []any{1}}}}), status: 400, pointer: "/confidence"},
		{name: "prediction response as string", path: curve + "/predictions", body: pred(map[string]any{"samples": []any{map[string]any{"id": "W", "responses": []any{"1.2"}}}}), status: 400, pointer: "/samples/0/responses/0"},
		{name: "prediction over 1000 samples", path: curve + "/predictions", body: pred(map[string]any{"samples": manySamples(1001)}), status: 400, pointer: "/samples"},
		{name: "prediction zero dilution", path: curve + "/predictions", body: pred(map[string]any{"samples": []any{map[string]any{"id": "W", "responses": []any{1}, "dilution": 0}}}), status: 400, pointer: "/samples/0/dilution"},
		{name: "prediction negative dilution", path: curve + "/predictions", body: pred(map[string]any{"samples": []any{map[string]any{"id": "W", "responses": []any{1}, "dilution": -2}}}), status: 400, pointer: "/samples/0/dilution"},
		{name: "prediction 1e308 response", path: curve + "/predictions", body: pred(map[string]any{"samples": []any{map[string]any{"id": "W", "responses": []any{1e308}}}}), status: 400, pointer: "/samples/0/responses/0"},
		{name: "prediction -1e308 response", path: curve + "/predictions", body: pred(map[string]any{"samples": []any{map[string]any{"id": "W", "responses": []any{-1e308}}}}), status: 400, pointer: "/samples/0/responses/0"},
		{name: "prediction Infinity as bare token", path: curve + "/predictions", body: []byte(`{"samples":[{"id":"W","responses":[Infinity]}]}`), status: 400},
		{name: "prediction NaN as string", path: curve + "/predictions", body: pred(map[string]any{"samples": []any{map[string]any{"id": "W", "responses": []any{"NaN"}}}}), status: 400, pointer: "/samples/0/responses/0"},
		{name: "prediction unknown field", path: curve + "/predictions", body: pred(map[string]any{"samples": []any{map[string]any{"id": "W", "responses": []any{1}}}, "units": "ppm"}), status: 400},
		{name: "prediction malformed JSON", path: curve + "/predictions", body: []byte(`{"samples": [{"id": "W", "responses": [1,`), status: 400},
		{name: "prediction SQL in sample id", path: curve + "/predictions", body: pred(map[string]any{"samples": []any{map[string]any{"id": "W'; DELETE FROM audit; --", "responses": []any{1}}}}), status: 400, pointer: "/samples/0/id"},
		{name: "prediction control character in sample id", path: curve + "/predictions", body: pred(map[string]any{"samples": []any{map[string]any{"id": "W\x07", "responses": []any{1}}}}), status: 400, pointer: "/samples/0/id"},
		{name: "prediction text/plain", path: curve + "/predictions", contentType: "text/plain", body: pred(map[string]any{"samples": []any{map[string]any{"id": "W", "responses": []any{1}}}}), status: 415},
		{name: "CSV 100,000 readings of one level", path: csvPathOK, contentType: "text/csv", body: []byte(csvHead + strings.Repeat("standard,nitrate,L1,0.5,0.3,,\n", 100000)), status: 422},
		{name: "review with unknown decision", path: curve + "/review", body: pred(map[string]any{"decision": "maybe"}), status: 400, pointer: "/decision"},
		{name: "review reason with NUL", path: curve + "/review", body: pred(map[string]any{"decision": "reject", "reason": "bad\x00"}), status: 400, pointer: "/reason"},
		{name: "method with unknown model", path: "/v1/methods", body: pred(map[string]any{"name": "m2", "model": "cubic", "weighting": "none", "analytes": []any{map[string]any{"name": "a", "unit": "mg/L"}}}), status: 400, pointer: "/model"},
		{name: "method analyte listed twice", path: "/v1/methods", body: pred(map[string]any{"name": "m2", "model": "linear", "weighting": "none", "analytes": []any{map[string]any{"name": "a", "unit": "mg/L"}, map[string]any{"name": "a", "unit": "ug/L"}}}), status: 422, pointer: "/analytes/1/name"},
		{name: "method min_levels 1", path: "/v1/methods", body: pred(map[string]any{"name": "m2", "model": "linear", "weighting": "none", "analytes": []any{map[string]any{"name": "a", "unit": "mg/L"}}, "acceptance": map[string]any{"min_levels": 1}}), status: 400, pointer: "/acceptance/min_levels"},
		{name: "token with unknown scope", path: "/v1/tokens", body: pred(map[string]any{"name": "x", "scopes": []any{"root"}}), status: 400, pointer: "/scopes/0"},
		{name: "token with a scope twice", path: "/v1/tokens", body: pred(map[string]any{"name": "x", "scopes": []any{"admin", "admin"}}), status: 400, pointer: "/scopes"},
		{name: "token name with space", path: "/v1/tokens", body: pred(map[string]any{"name": "lims 1", "scopes": []any{"admin"}}), status: 400, pointer: "/name"},
		{name: "curve id not a UUID", method: http.MethodGet, path: "/v1/curves/not-a-uuid", status: 400, pointer: "path:id"},
		{name: "run id with SQL", method: http.MethodGet, path: "/v1/runs/1%27%20OR%201=1", status: 400, pointer: "path:id"},
		{name: "history limit 0", method: http.MethodGet, path: "/v1/curves?limit=0", status: 400, pointer: "query:limit"},
		{name: "history limit 1000", method: http.MethodGet, path: "/v1/curves?limit=1000", status: 400, pointer: "query:limit"},
		{name: "history verdict unknown", method: http.MethodGet, path: "/v1/curves?verdict=maybe", status: 400, pointer: "query:verdict"},
		{name: "history from not a time", method: http.MethodGet, path: "/v1/curves?from=yesterday", status: 400, pointer: "query:from"},
		{name: "method revision 0", method: http.MethodGet, path: "/v1/methods/nitrate-uv?revision=0", status: 400, pointer: "query:revision"},
		{name: "method revision past int32", method: http.MethodGet, path: "/v1/methods/nitrate-uv?revision=2147483648", status: 400, pointer: "query:revision"},
		{name: "delete token id not a UUID", method: http.MethodDelete, path: "/v1/tokens/abc", status: 400, pointer: "path:id"},
	}
	runBadCases(t, e, cases)
}

func manySamples(n int) []any {
	out := make([]any, n)
	for i := range out {
		out[i] = map[string]any{"id": fmt.Sprintf("W-%d", i), "responses": []any{1.0}}
	}
	return out
}

func runBadCases(t *testing.T, e *env, cases []badCase) {
	t.Helper()
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			c := call{method: tc.method, path: tc.path, token: e.admin, contentType: tc.contentType, body: tc.body,
				header: tc.header, unrouted: tc.unrouted}
			if c.method == "" {
				c.method = http.MethodPost
			}
			if c.path == "" {
				c.path = "/v1/runs"
			}
			if c.contentType == "" && c.method == http.MethodPost {
				c.contentType = "application/json"
			}
			before := e.counts(t)
			r := e.do(t, c)
			p := wantProblem(t, r, tc.status, tc.pointer)
			if p.Status >= 500 {
				t.Errorf("bad input answered %d", p.Status)
			}
			if d := before.diff(e.counts(t)); d != "" {
				t.Errorf("refused input wrote rows: %s", d)
			}
		})
	}
}

// TestBodyLimit refuses bodies over a server's configured limit with 413,
// declared or discovered while reading.
func TestBodyLimit(t *testing.T) {
	t.Parallel()
	e := newEnvConfig(t, api.Config{BodyLimit: 2048})
	e.method(t, "nitrate-uv", "nitrate")
	big := mutate(t, func(m map[string]any) {
		resp := make([]float64, 400)
		for i := range resp {
			resp[i] = 0.275 + float64(i)*1e-6
		}
		std(m, 0)["responses"] = resp
	})
	if len(big) <= 2048 {
		t.Fatalf("test body is only %d bytes", len(big))
	}
	csvBig, _ := nitrateCSV(1)
	csvBig += strings.Repeat("# padding comment line\n", 100)
	runBadCases(t, e, []badCase{
		{name: "JSON over the limit", body: big, status: 413},
		{name: "CSV over the limit", path: csvPath("nitrate-uv", "photometer-7", "2026-03-02T08:00:00Z"), contentType: "text/csv", body: []byte(csvBig), status: 413},
		{name: "method over the limit", path: "/v1/methods", body: mustJSON(t, map[string]any{"name": "m", "model": "linear", "weighting": "none",
			"description": strings.Repeat("d", 1990), "analytes": []any{map[string]any{"name": "a", "unit": "mg/L"}, map[string]any{"name": "b", "unit": "mg/L"}}}), status: 413},
	})
	// Under the limit still works.
	if r := e.postJSON(t, e.admin, "/v1/runs", runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)[:6])); r.status != http.StatusCreated {
		t.Errorf("a run under the limit: %s", r)
	}
}
