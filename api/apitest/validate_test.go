package apitest

import (
	"encoding/json"
	"fmt"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/google/uuid"

	"curvekeeper/api/oapi"
)

const curveID = "6f1c2b8e-3d4a-4e5f-9a0b-1c2d3e4f5a6b"

var cautions = []string{"Acceptance is computed against configured default criteria; the laboratory's accreditation, regulator and method SOP take precedence; a qualified person reviews results before release."}

func ptr[T any](v T) *T { return &v }

// validCurve is a complete curve built from the generated types, so the test
// also shows that what the generated code marshals is what the spec says.
// The numbers are invented and need not be a consistent fit.
func validCurve() oapi.Curve {
	at := time.Date(2026, 11, 3, 8, 30, 0, 0, time.UTC)
	point := oapi.CurvePoint{
		Level: "L1", Concentration: 0.5, Response: 0.0102, Weight: ptr(1.0),
		Fitted: ptr(0.0101), Residual: ptr(0.0001), StudentizedResidual: ptr(0.4),
		Leverage: ptr(0.3), CooksDistance: ptr(0.02), BackCalculated: ptr(0.505),
		RelativeErrorPct: ptr(1.0),
	}
	return oapi.Curve{
		ID: uuid.MustParse(curveID), RunID: uuid.MustParse("0b9e8d7c-6a5b-4c3d-8e2f-1a0b9c8d7e6f"),
		Method: "nitrate-uv", MethodRevision: 1, Instrument: "photometer-1", Analyte: "nitrate", Unit: "mg/L",
		Model: oapi.ModelLinear, Weighting: oapi.WeightingInvX, WeightingRequested: oapi.WeightingAuto,
		Flags: []oapi.FitFlag{},
		WeightCandidates: []oapi.WeightCandidate{
			{Weighting: oapi.WeightingInvX, SumAbsRe: ptr(3.1), Chosen: true},
			{Weighting: oapi.WeightingInvS2, Note: "too few replicates for a variance model"},
		},
		WeightConvention: "weights normalised to sum to n",
		Coefficients:     []float64{0.0002, 0.0203}, StandardErrors: []float64{0.0001, 0.0002},
		Covariance: [][]float64{{1e-8, -1e-9}, {-1e-9, 4e-8}},
		ResidualSd: ptr(0.0003), Df: 4, RSquared: ptr(0.9993), N: 6, Levels: 3, Confidence: 0.95,
		Points: []oapi.CurvePoint{point, {Level: "L0", Concentration: 0, Response: 0.0001, Excluded: true}},
		Checks: []oapi.Check{
			{Name: oapi.CheckRSquared, Statistic: ptr(0.9993), Limit: ptr(0.99), Passed: true, Computed: true,
				Mandatory: true, Source: "US EPA SW-846 8000D", Detail: "r² ≥ 0.99"},
			{Name: oapi.CheckLackOfFit, Computed: false, Source: "ISO 8466-1", Detail: "needs replicates"},
		},
		Limits:  oapi.Limits{Lod: ptr(0.05), Loq: ptr(0.15), CriticalValue: ptr(0.0009), CriticalConcentration: ptr(0.03), DetectionLimit: ptr(0.06)},
		Range:   oapi.Range{Low: ptr(0.5), High: ptr(2.0)},
		Verdict: oapi.VerdictPass, Status: oapi.CurveStatusApproved,
		Review:     &oapi.Review{Decision: oapi.ReviewApprove, Actor: "qa-1", At: oapi.NewTimestamp(at.Add(time.Hour))},
		AcquiredAt: oapi.NewTimestamp(at), CreatedAt: oapi.NewTimestamp(at.Add(time.Minute)), Cautions: cautions, EngineVersion: "calib/1.0.0",
	}
}

func mustJSON(t *testing.T, v any) []byte {
	t.Helper()
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// edit decodes b, lets f change it and encodes it again.
func edit(t *testing.T, b []byte, f func(m map[string]any)) []byte {
	t.Helper()
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	f(m)
	return mustJSON(t, m)
}

func response(status int, contentType string, header ...string) *http.Response {
	h := http.Header{}
	if contentType != "" {
		h.Set("Content-Type", contentType)
	}
	for i := 0; i+1 < len(header); i += 2 {
		h.Set(header[i], header[i+1])
	}
	return &http.Response{StatusCode: status, Header: h}
}

const problemJSON = "application/problem+json"

func TestMismatches(t *testing.T) {
	curve := mustJSON(t, validCurve())
	curvePath := "/v1/curves/" + curveID
	tests := []struct {
		name     string
		method   string
		path     string
		resp     *http.Response
		body     []byte
		wantErrs []string // substrings, one per expected mismatch; none means valid
	}{
		{name: "valid curve", method: "GET", path: curvePath,
			resp: response(200, "application/json"), body: curve},
		{name: "wrong field type", method: "GET", path: curvePath,
			resp:     response(200, "application/json"),
			body:     edit(t, curve, func(m map[string]any) { m["df"] = "four" }),
			wantErrs: []string{"/df"}},
		{name: "number where nullable is allowed, string is not", method: "GET", path: curvePath,
			resp:     response(200, "application/json"),
			body:     edit(t, curve, func(m map[string]any) { m["checks"].([]any)[0].(map[string]any)["statistic"] = "NaN" }),
			wantErrs: []string{"/checks/0/statistic"}},
		{name: "missing cautions", method: "GET", path: curvePath,
			resp:     response(200, "application/json"),
			body:     edit(t, curve, func(m map[string]any) { delete(m, "cautions") }),
			wantErrs: []string{"cautions"}},
		{name: "empty cautions", method: "GET", path: curvePath,
			resp:     response(200, "application/json"),
			body:     edit(t, curve, func(m map[string]any) { m["cautions"] = []any{} }),
			wantErrs: []string{"/cautions"}},
		{name: "field the spec does not describe", method: "GET", path: curvePath,
			resp:     response(200, "application/json"),
			body:     edit(t, curve, func(m map[string]any) { m["slope"] = 0.02 }),
			wantErrs: []string{"slope"}},
		{name: "enum value outside the spec", method: "GET", path: curvePath,
			resp:     response(200, "application/json"),
			body:     edit(t, curve, func(m map[string]any) { m["verdict"] = "ok" }),
			wantErrs: []string{"/verdict"}},
		{name: "undocumented status", method: "GET", path: curvePath,
			resp: response(202, "application/json"), body: curve,
			wantErrs: []string{"status 202 is not documented for GET /v1/curves/{id}"}},
		{name: "undocumented content type", method: "GET", path: curvePath,
			resp: response(200, "text/html"), body: []byte("<p>curve</p>"),
			wantErrs: []string{"text/html"}},
		{name: "route the spec lacks", method: "GET", path: "/v1/curvez",
			resp: response(200, "application/json"), body: []byte("{}"),
			wantErrs: []string{"no route"}},
		{name: "valid run created with its headers", method: "POST", path: "/v1/runs",
			resp: response(201, "application/json", "Location", "/v1/runs/"+curveID, "Idempotency-Replayed", "false"),
			body: mustJSON(t, oapi.RunCreated{ID: uuid.MustParse(curveID), Curves: []oapi.RunCurve{
				{ID: uuid.MustParse(curveID), Analyte: "nitrate", Verdict: oapi.VerdictFail, Status: oapi.CurveStatusPendingReview}},
				Cautions: cautions})},
		{name: "run created without its required headers", method: "POST", path: "/v1/runs",
			resp:     response(201, "application/json"),
			body:     mustJSON(t, oapi.RunCreated{ID: uuid.MustParse(curveID), Curves: []oapi.RunCurve{}, Cautions: cautions}),
			wantErrs: []string{`header "Idempotency-Replayed" missing`}},
		{name: "valid token revocation", method: "DELETE", path: "/v1/tokens/" + curveID,
			resp: response(204, "")},
		{name: "valid problem", method: "POST", path: "/v1/runs",
			resp: response(422, problemJSON),
			body: []byte(`{"type":"urn:curvekeeper:problem:invalid","title":"Invalid input","status":422,"detail":"the method does not list this analyte","errors":[{"pointer":"/standards/2/analyte","detail":"not listed by method nitrate-uv"},{"pointer":"/lines/7/response","detail":"not a number"},{"pointer":"query:acquired_at","detail":"required with text/csv"}]}`)},
		{name: "problem as application/json", method: "GET", path: curvePath,
			resp:     response(404, "application/json"),
			body:     []byte(`{"type":"urn:curvekeeper:problem:not-found","title":"Not found","status":404,"detail":"no such curve"}`),
			wantErrs: []string{"application/json", "application/problem+json"}},
		{name: "problem status differs from response", method: "GET", path: curvePath,
			resp:     response(404, problemJSON),
			body:     []byte(`{"type":"urn:curvekeeper:problem:not-found","title":"Not found","status":400,"detail":"no such curve"}`),
			wantErrs: []string{"problem status 400"}},
		{name: "500 that leaks its cause", method: "GET", path: curvePath,
			resp:     response(500, problemJSON),
			body:     []byte(`{"type":"urn:curvekeeper:problem:internal","title":"Internal error","status":500,"detail":"pq: relation curves does not exist","request_id":"r-1"}`),
			wantErrs: []string{"internal error"}},
		{name: "401 without WWW-Authenticate", method: "GET", path: curvePath,
			resp:     response(401, problemJSON),
			body:     []byte(`{"type":"urn:curvekeeper:problem:unauthorized","title":"Unauthorized","status":401,"detail":"send a bearer token"}`),
			wantErrs: []string{"WWW-Authenticate"}},
		{name: "503 without Retry-After", method: "GET", path: "/readyz",
			resp:     response(503, problemJSON),
			body:     []byte(`{"type":"urn:curvekeeper:problem:unavailable","title":"Service unavailable","status":503,"detail":"the database cannot be reached"}`),
			wantErrs: []string{"Retry-After"}},
		{name: "problem field named by a bare name", method: "POST", path: "/v1/runs",
			resp:     response(400, problemJSON),
			body:     []byte(`{"type":"urn:curvekeeper:problem:bad-request","title":"Bad request","status":400,"detail":"bad","errors":[{"pointer":"standards.0.concentration","detail":"negative"}]}`),
			wantErrs: []string{"standards.0.concentration"}},
		{name: "valid health", method: "GET", path: "/healthz",
			resp: response(200, "application/json"), body: []byte(`{"status":"ok"}`)},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			req := httptest.NewRequest(tt.method, tt.path, nil)
			got := Mismatches(req, tt.resp, tt.body)
			if len(tt.wantErrs) == 0 {
				if len(got) != 0 {
					t.Fatalf("mismatches %q, want none", got)
				}
				return
			}
			if len(got) == 0 {
				t.Fatalf("no mismatch, want ones mentioning %q", tt.wantErrs)
			}
			all := strings.Join(got, "\n")
			for _, w := range tt.wantErrs {
				if !strings.Contains(all, w) {
					t.Errorf("mismatches %q do not mention %q", got, w)
				}
			}
		})
	}
}

// recorder is a testing.TB that keeps failures instead of reporting them.
type recorder struct {
	testing.TB
	errs []string
}

func (r *recorder) Helper() {}
func (r *recorder) Errorf(format string, args ...any) {
	r.errs = append(r.errs, fmt.Sprintf(format, args...))
}

func TestValidateResponseFailsTheTest(t *testing.T) {
	curve := edit(t, mustJSON(t, validCurve()), func(m map[string]any) { m["r_squared"] = "high" })
	rec := httptest.NewRecorder()
	rec.Header().Set("Content-Type", "application/json")
	rec.WriteHeader(http.StatusOK)
	rec.Write(curve)
	req := httptest.NewRequest("GET", "/v1/curves/"+curveID, nil)

	r := &recorder{TB: t}
	ValidateRecorder(r, req, rec)
	if len(r.errs) != 1 {
		t.Fatalf("got %d failures %q, want 1", len(r.errs), r.errs)
	}
	for _, want := range []string{"GET /v1/curves/" + curveID, "→ 200", "/r_squared", `"r_squared":"high"`} {
		if !strings.Contains(r.errs[0], want) {
			t.Errorf("failure %q does not mention %q", r.errs[0], want)
		}
	}

	r = &recorder{TB: t}
	ValidateResponse(r, req, response(200, "application/json"), mustJSON(t, validCurve()))
	if len(r.errs) != 0 {
		t.Errorf("a valid curve failed: %q", r.errs)
	}
}
