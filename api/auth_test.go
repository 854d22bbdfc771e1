package api_test

import (
	"fmt"
	"net/http"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"github.com/getkin/kin-openapi/openapi3"

	"curvekeeper/api"
	"curvekeeper/api/oapi"
	"curvekeeper/openapi"
)

func TestTokensCreateUseRevoke(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	r := e.postJSON(t, e.admin, "/v1/tokens", map[string]any{"name": "lims-1", "scopes": []string{"results:read"}})
	tc := decode[oapi.TokenCreated](t, r, http.StatusCreated)
	if len(tc.Token) < 22 || tc.Name != "lims-1" || !slices.Equal(tc.Scopes, []oapi.Scope{"results:read"}) {
		t.Errorf("token %+v, want a secret of ≥ 22 characters named lims-1 with results:read", tc)
	}
	// The secret is shown once: the database keeps only its SHA-256.
	var withSecret, withHash int
	if err := e.db.Pool.QueryRow(t.Context(), `SELECT count(*) FILTER (WHERE position($1 in t::text) > 0),
       count(*) FILTER (WHERE hash = sha256(convert_to($1, 'UTF8'))) FROM tokens t`, tc.Token).Scan(&withSecret, &withHash); err != nil {
		t.Fatal(err)
	}
	if withSecret != 0 || withHash != 1 {
		t.Errorf("%d rows hold the secret and %d its SHA-256, want 0 and 1", withSecret, withHash)
	}
	if strings.Contains(e.logs.String(), tc.Token) {
		t.Error("the server logged the token's secret")
	}
	// Two tokens never share a secret.
	_, other := e.token(t, "lims-2", "results:read")
	if other == tc.Token {
		t.Error("two tokens got the same secret")
	}

	if got := e.get(t, tc.Token, "/v1/curves"); got.status != http.StatusOK {
		t.Fatalf("new token: %s", got)
	}
	del := e.do(t, call{method: http.MethodDelete, path: "/v1/tokens/" + tc.ID.String(), token: e.admin})
	if del.status != http.StatusNoContent {
		t.Fatalf("revoke: %s", del)
	}
	wantProblem(t, e.get(t, tc.Token, "/v1/curves"), http.StatusUnauthorized, "")
	// The other token still works.
	if got := e.get(t, other, "/v1/curves"); got.status != http.StatusOK {
		t.Errorf("unrevoked token after another's revocation: %s", got)
	}
	wantProblem(t, e.do(t, call{method: http.MethodDelete, path: "/v1/tokens/0b9e8d7c-6a5b-4c3d-8e2f-1a0b9c8d7e6f", token: e.admin}), http.StatusNotFound, "")
}

func TestUnauthenticated(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	tests := []struct {
		name string
		auth string
	}{
		{"no header", ""},
		{"basic scheme", "Basic YWRtaW46YWRtaW4="},
		{"bearer without token", "Bearer "},
		{"bearer with two words", "Bearer abc def"},
		{"token without scheme", bootstrapSecret},
		{"unknown token", "Bearer ck_unknown_0000000000000000000000000000"},
		{"oversized token", "Bearer " + strings.Repeat("a", 300)},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := e.do(t, call{method: http.MethodGet, path: "/v1/curves", auth: tt.auth})
			wantProblem(t, r, http.StatusUnauthorized, "")
			if !strings.HasPrefix(r.header.Get("WWW-Authenticate"), "Bearer") {
				t.Errorf("WWW-Authenticate %q, want a Bearer challenge", r.header.Get("WWW-Authenticate"))
			}
		})
	}
	// The scheme name is case-insensitive (RFC 7235).
	if r := e.do(t, call{method: http.MethodGet, path: "/v1/curves", auth: "bearer " + bootstrapSecret}); r.status != http.StatusOK {
		t.Errorf("lower-case scheme: %s", r)
	}
}

// specScopes reads x-required-scopes of every /v1 operation from the spec,
// keyed by operationId, so that the matrix follows the contract.
func specScopes(t *testing.T) map[string]struct {
	method, path string
	scopes       []string
} {
	t.Helper()
	doc, err := openapi3.NewLoader().LoadFromData(openapi.YAML)
	if err != nil {
		t.Fatalf("load spec: %v", err)
	}
	out := map[string]struct {
		method, path string
		scopes       []string
	}{}
	for path, item := range doc.Paths.Map() {
		for method, op := range item.Operations() {
			if !strings.HasPrefix(path, "/v1/") {
				continue
			}
			raw, ok := op.Extensions["x-required-scopes"].([]any)
			if !ok || len(raw) == 0 {
				t.Errorf("%s %s has no x-required-scopes", method, path)
				continue
			}
			var scopes []string
			for _, s := range raw {
				scopes = append(scopes, fmt.Sprint(s))
			}
			if !slices.Contains(scopes, "admin") {
				t.Errorf("%s %s: x-required-scopes %v does not list admin", method, path, scopes)
			}
			out[op.OperationID] = struct {
				method, path string
				scopes       []string
			}{method, path, scopes}
		}
	}
	return out
}

// TestScopeMatrix sends every /v1 route as every kind of caller and expects
// exactly the status the spec's x-required-scopes implies: the route's
// success status for a token holding any one listed scope, 403 for any other
// valid token, 401 without a valid token.
func TestScopeMatrix(t *testing.T) {
	t.Parallel()
	// The matrix sends many revoked and unknown tokens from one address on
	// purpose; the failure limit has tests of its own.
	e := newEnvConfig(t, api.Config{AuthFailureBurst: -1})
	fixtures := routeFixtures(t, e)

	ops := specScopes(t)
	for id := range ops {
		if fixtures[id] == nil {
			t.Errorf("the spec's operation %s has no fixture in the matrix", id)
		}
	}
	for id := range fixtures {
		if _, ok := ops[id]; !ok {
			t.Errorf("fixture %s names no /v1 operation of the spec", id)
		}
	}

	type caller struct {
		name  string
		scope string // "" for callers without a valid token
		auth  string
	}
	var callers []caller
	for _, s := range []string{"runs:write", "results:read", "curves:review", "admin"} {
		_, secret := e.token(t, strings.ReplaceAll(s, ":", "-")+"-holder", s)
		callers = append(callers, caller{s, s, "Bearer " + secret})
	}
	revokedID, revoked := e.token(t, "revoked-holder", "admin")
	if r := e.do(t, call{method: http.MethodDelete, path: "/v1/tokens/" + revokedID, token: e.admin}); r.status != http.StatusNoContent {
		t.Fatalf("revoke: %s", r)
	}
	callers = append(callers, caller{name: "no token"}, caller{name: "revoked admin token", auth: "Bearer " + revoked},
		caller{name: "malformed header", auth: "Token " + e.admin})

	ids := make([]string, 0, len(ops))
	for id := range ops {
		ids = append(ids, id)
	}
	sort.Strings(ids)
	cells := 0
	for _, id := range ids {
		op := ops[id]
		for _, c := range callers {
			t.Run(id+"/"+c.name, func(t *testing.T) {
				req, success := fixtures[id](t)
				req.auth = c.auth
				want := http.StatusUnauthorized
				if c.scope != "" {
					want = http.StatusForbidden
					if slices.Contains(op.scopes, c.scope) {
						want = success
					}
				}
				got := e.do(t, req)
				cells++
				if got.status != want {
					t.Errorf("%s %s as %s (route admits %v): %s, want %d", op.method, op.path, c.name, op.scopes, got, want)
				}
			})
		}
	}
	if want := len(ops) * len(callers); cells != want {
		t.Errorf("ran %d cells, want %d", cells, want)
	}
	t.Logf("security: scope matrix: %d /v1 operations × %d callers = %d cases", len(ops), len(callers), cells)
}

// routeFixtures gives each /v1 operation a request that succeeds for an
// admitted caller (the admin token), and that success status; a write's
// fixture makes a fresh request each time it is called. It sets up e: the
// method nitrate-uv, a run on photometer-7 with a late sample, an approved
// curve, the person matrix-qa and the material CRM-0.
func routeFixtures(t *testing.T, e *env) map[string]func(t *testing.T) (call, int) {
	t.Helper()
	e.method(t, "nitrate-uv", "nitrate")
	run := e.run(t, e.admin, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)))
	curve := "/v1/curves/" + run.Curves[0].ID.String()
	e.person(t, "matrix-qa", "Matrix QA", "reviewer", "qa-approver")
	n := 0
	// Fresh curves come from an instrument token, so that every caller,
	// admin included, may review them (the four-eyes rule).
	_, poster := e.token(t, "matrix-instrument", "runs:write")
	freshCurve := func(t *testing.T) string {
		n++
		r := e.run(t, poster, runBody("nitrate-uv", "photometer-7", baseTime.AddDate(0, 0, n), standards("nitrate", uint64(n))))
		return "/v1/curves/" + r.Curves[0].ID.String()
	}
	jsonCall := func(method, path string, v any) call {
		return call{method: method, path: path, contentType: "application/json", body: mustJSON(t, v)}
	}
	// The results and QC routes need a sample with a result and an approved
	// curve in force on photometer-7.
	late := func(id string) map[string]any {
		return map[string]any{"samples": []map[string]any{{"id": id, "analyte": "nitrate", "responses": []float64{1.5},
			"acquired_at": baseTime.Add(time.Hour).Format(time.RFC3339)}}}
	}
	if r := e.postJSON(t, e.admin, "/v1/runs/"+run.ID.String()+"/samples", late("MX-1")); r.status != http.StatusCreated {
		t.Fatalf("add a sample: %s", r)
	}
	if r := e.postJSON(t, e.admin, freshCurve(t)+"/review", map[string]any{"decision": "approve"}); r.status != http.StatusOK {
		t.Fatalf("approve a curve: %s", r)
	}
	const future = "2030-01-01T00:00:00Z"
	// fixtures gives each operation a request that succeeds for an admitted
	// caller, and that success status.
	// CRM-0 for getStandardMaterial; createStandardMaterial counts on from it.
	materials := 0
	if r := e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{"code": "CRM-0", "kind": "reference_material",
		"analyte": "nitrate", "unit": "mg/L", "value": 1000.0, "tolerance": 2.0, "expires_at": future}); r.status != http.StatusCreated {
		t.Fatalf("standard material: %s", r)
	}
	// A top-down history for getMethodTopDown: a check standard and CRM-0.
	for _, v := range []map[string]any{{"level": "CCV", "concentration": 2}, {"level": "CRM", "concentration": 1000, "material": "CRM-0"}} {
		v["responses"], v["kind"], v["acquired_at"] = []float64{1.5}, "continuing", baseTime.Add(time.Hour).Format(time.RFC3339)
		if r := e.postJSON(t, e.admin, curve+"/verifications", v); r.status != http.StatusCreated {
			t.Fatalf("verification for the top-down history: %s", r)
		}
	}
	return map[string]func(t *testing.T) (call, int){
		"createRun": func(t *testing.T) (call, int) {
			n++
			return jsonCall(http.MethodPost, "/v1/runs", runBody("nitrate-uv", "photometer-7", baseTime.AddDate(0, 1, n), standards("nitrate", 3))), http.StatusCreated
		},
		"createRunCsv": func(t *testing.T) (call, int) {
			n++
			body, _ := nitrateCSV(3)
			path := "/v1/runs/csv" + strings.TrimPrefix(csvPath("nitrate-uv", "photometer-7", baseTime.AddDate(0, 1, n).Format(time.RFC3339)), "/v1/runs")
			return call{method: http.MethodPost, path: path, contentType: "text/csv", body: []byte(body)}, http.StatusCreated
		},
		"getRun": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/runs/" + run.ID.String()}, http.StatusOK
		},
		"listCurves": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/curves?limit=5"}, http.StatusOK
		},
		"getCurve": func(*testing.T) (call, int) { return call{method: http.MethodGet, path: curve}, http.StatusOK },
		"createPredictions": func(*testing.T) (call, int) {
			return jsonCall(http.MethodPost, curve+"/predictions", map[string]any{"samples": []map[string]any{{"id": "W-1", "responses": []float64{1.5}}}}), http.StatusOK
		},
		"reviewCurve": func(t *testing.T) (call, int) {
			return jsonCall(http.MethodPost, freshCurve(t)+"/review", map[string]any{"decision": "approve"}), http.StatusOK
		},
		"getCurveAudit": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: curve + "/audit"}, http.StatusOK
		},
		"getCurvePlotSVG": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: curve + "/plot.svg"}, http.StatusOK
		},
		"getCurvePlotPNG": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: curve + "/plot.png"}, http.StatusOK
		},
		"getTrend": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/trends?instrument=photometer-7&analyte=nitrate"}, http.StatusOK
		},
		"getTrendPlotSVG": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/trends/plot.svg?instrument=photometer-7&analyte=nitrate"}, http.StatusOK
		},
		"createMethod": func(*testing.T) (call, int) {
			n++
			return jsonCall(http.MethodPost, "/v1/methods", map[string]any{"name": fmt.Sprintf("method-%d", n), "model": "linear",
				"weighting": "none", "analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L"}}}), http.StatusCreated
		},
		"listMethods": func(*testing.T) (call, int) { return call{method: http.MethodGet, path: "/v1/methods"}, http.StatusOK },
		"getMethod": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/methods/nitrate-uv"}, http.StatusOK
		},
		"getMethodTopDown": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/methods/nitrate-uv/top-down?analyte=nitrate&from=" +
				baseTime.Format(time.RFC3339) + "&to=" + baseTime.AddDate(0, 0, 1).Format(time.RFC3339)}, http.StatusOK
		},
		"createToken": func(*testing.T) (call, int) {
			return jsonCall(http.MethodPost, "/v1/tokens", map[string]any{"name": "lims-9", "scopes": []string{"results:read"}}), http.StatusCreated
		},
		"createRunSamples": func(*testing.T) (call, int) {
			n++
			return jsonCall(http.MethodPost, "/v1/runs/"+run.ID.String()+"/samples", late(fmt.Sprintf("MX-%d", 100+n))), http.StatusCreated
		},
		"getRunResults": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/runs/" + run.ID.String() + "/results"}, http.StatusOK
		},
		"getSampleResults": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/samples/MX-1"}, http.StatusOK
		},
		"getResult": func(t *testing.T) (call, int) {
			rs := decode[oapi.SampleResults](t, e.get(t, e.admin, "/v1/samples/MX-1"), http.StatusOK)
			return call{method: http.MethodGet, path: fmt.Sprintf("/v1/results/%d", rs.Results[0].ID)}, http.StatusOK
		},
		"listResultEvents": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/results?limit=5"}, http.StatusOK
		},
		"createVerification": func(*testing.T) (call, int) {
			return jsonCall(http.MethodPost, curve+"/verifications", map[string]any{"level": "CCV", "concentration": 2,
				"responses": []float64{1.5}, "kind": "continuing", "acquired_at": baseTime.Add(2 * time.Hour).Format(time.RFC3339)}), http.StatusCreated
		},
		"listVerifications": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: curve + "/verifications"}, http.StatusOK
		},
		"createExclusion": func(t *testing.T) (call, int) {
			return jsonCall(http.MethodPost, freshCurve(t)+"/exclusions", map[string]any{"reason": "late injection",
				"points": []map[string]any{{"level": "L2", "replicate": 1}}}), http.StatusCreated
		},
		"getCurveInForce": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/instruments/photometer-7/curves/current?analyte=nitrate&at=" + future}, http.StatusOK
		},
		"createInstrumentPredictions": func(*testing.T) (call, int) {
			return jsonCall(http.MethodPost, "/v1/instruments/photometer-7/predictions", map[string]any{"analyte": "nitrate", "at": future,
				"samples": []map[string]any{{"id": "W-1", "responses": []float64{1.5}}}}), http.StatusOK
		},
		"createInstrumentPredictionBatch": func(*testing.T) (call, int) {
			return jsonCall(http.MethodPost, "/v1/instruments/photometer-7/predictions/batch", map[string]any{"at": future,
				"analytes": []map[string]any{{"analyte": "nitrate", "samples": []map[string]any{{"id": "W-1", "responses": []float64{1.5}}}}}}), http.StatusOK
		},
		"createStandardMaterial": func(*testing.T) (call, int) {
			materials++
			return jsonCall(http.MethodPost, "/v1/standard-materials", map[string]any{"code": fmt.Sprintf("CRM-%d", materials),
				"kind": "reference_material", "analyte": "nitrate", "unit": "mg/L", "value": 1000.0, "tolerance": 2.0,
				"expires_at": future}), http.StatusCreated
		},
		"listStandardMaterials": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/standard-materials"}, http.StatusOK
		},
		"getStandardMaterial": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/standard-materials/CRM-0"}, http.StatusOK
		},
		"listPeople": func(*testing.T) (call, int) { return call{method: http.MethodGet, path: "/v1/people"}, http.StatusOK },
		"createPerson": func(*testing.T) (call, int) {
			n++
			return jsonCall(http.MethodPost, "/v1/people", map[string]any{"login": fmt.Sprintf("p-%d", n), "full_name": "Pat Example",
				"roles": []string{"analyst"}, "password": "matrix-password"}), http.StatusCreated
		},
		"disablePerson": func(t *testing.T) (call, int) {
			n++
			e.person(t, fmt.Sprintf("d-%d", n), "Dana Example", "analyst")
			return call{method: http.MethodPost, path: fmt.Sprintf("/v1/people/d-%d/disable", n)}, http.StatusOK
		},
		"unlockPerson": func(*testing.T) (call, int) {
			return call{method: http.MethodPost, path: "/v1/people/matrix-qa/unlock"}, http.StatusOK
		},
		"signCurve": func(t *testing.T) (call, int) {
			return jsonCall(http.MethodPost, freshCurve(t)+"/signatures", map[string]any{"login": "matrix-qa", "password": "matrix-qa-password",
				"meaning": "review"}), http.StatusCreated
		},
		"listCurveSignatures": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: curve + "/signatures"}, http.StatusOK
		},
		"withdrawSignature": func(t *testing.T) (call, int) {
			sig := decode[oapi.Signature](t, e.postJSON(t, e.admin, freshCurve(t)+"/signatures", map[string]any{"login": "matrix-qa",
				"password": "matrix-qa-password", "meaning": "review"}), http.StatusCreated)
			return jsonCall(http.MethodPost, "/v1/signatures/"+sig.ID.String()+"/withdrawal", map[string]any{"login": "matrix-qa",
				"password": "matrix-qa-password", "reason": "matrix"}), http.StatusOK
		},
		"searchAudit": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: "/v1/audit?person=matrix-qa&limit=5"}, http.StatusOK
		},
		"getCurveRecordPDF": func(*testing.T) (call, int) {
			return call{method: http.MethodGet, path: curve + "/record.pdf"}, http.StatusOK
		},
		"recalculateCurve": func(*testing.T) (call, int) {
			return call{method: http.MethodPost, path: curve + "/recalculation"}, http.StatusOK
		},
		"deleteToken": func(t *testing.T) (call, int) {
			id, _ := e.token(t, "doomed", "results:read")
			return call{method: http.MethodDelete, path: "/v1/tokens/" + id}, http.StatusNoContent
		},
	}
}
