package api_test

import (
	"net/http"
	"net/url"
	"strings"
	"testing"
	"time"

	"curvekeeper/api"
	"curvekeeper/api/oapi"
	"curvekeeper/lab"
	"curvekeeper/store/dbtest"
)

// testNow is the receipt clock of every test server: after every invented
// date the tests post, so that no test depends on the wall clock.
var testNow = time.Date(2032, 1, 5, 9, 0, 0, 0, time.UTC)

var testClock = lab.WithClock(func() time.Time { return testNow })

// TestTimestampsAreRepresentableAndPlausible: a time the service accepts
// must lie in years 1 to 9999 once in UTC (so that it reads back) and not
// more than the allowed skew after its receipt; a refusal names the field.
func TestTimestampsAreRepresentableAndPlausible(t *testing.T) {
	t.Parallel()
	received := time.Date(2026, 3, 5, 12, 0, 0, 0, time.UTC)
	e := newEnvDB(t, api.Config{}, dbtest.NewDB(t), lab.WithClock(func() time.Time { return received }))
	run := e.nitrateCurve(t) // acquired at baseTime, 2026-03-02T08:00:00Z
	curve := "/v1/curves/" + run.Curves[0].ID.String()
	before := e.counts(t)

	at := func(s string) map[string]any {
		b := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 2))
		b["acquired_at"] = s
		return b
	}
	for _, tt := range []struct{ name, at string }{
		{"past year 9999 in UTC", "9999-12-31T23:59:59-14:00"},
		{"before year 1 in UTC", "0000-01-01T00:00:00+14:00"},
		{"more than 24 h after receipt", "2026-03-06T12:00:01Z"},
	} {
		t.Run("run "+tt.name, func(t *testing.T) {
			wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", at(tt.at)), http.StatusUnprocessableEntity, "/acquired_at")
		})
	}
	t.Run("CSV run past year 9999 in UTC", func(t *testing.T) {
		csv, _ := nitrateCSV(3)
		r := e.do(t, call{method: http.MethodPost, path: csvPath("nitrate-uv", "photometer-7", "9999-12-31T23:59:59-14:00"),
			token: e.admin, contentType: "text/csv", body: []byte(csv)})
		wantProblem(t, r, http.StatusBadRequest, "query:acquired_at")
	})
	late := func(s string) map[string]any {
		return map[string]any{"samples": []map[string]any{{"id": "LATE-1", "analyte": "nitrate", "responses": []float64{1.5}, "acquired_at": s}}}
	}
	ccv := func(s string) map[string]any {
		return map[string]any{"kind": "continuing", "level": "CCV", "concentration": 2, "responses": []float64{1.04}, "acquired_at": s}
	}
	for _, s := range []string{"9999-12-31T23:59:59-14:00", "9999-12-31T00:00:00Z", "2026-03-06T12:00:01Z"} {
		wantProblem(t, e.postJSON(t, e.admin, "/v1/runs/"+run.ID.String()+"/samples", late(s)), http.StatusUnprocessableEntity, "/samples/0/acquired_at")
		wantProblem(t, e.postJSON(t, e.admin, curve+"/verifications", ccv(s)), http.StatusUnprocessableEntity, "/acquired_at")
	}
	for _, q := range []string{
		"/v1/instruments/photometer-7/curves/current?analyte=nitrate&at=",
		"/v1/curves?from=", "/v1/curves?to=",
		"/v1/trends?instrument=photometer-7&analyte=nitrate&from=",
	} {
		u, _ := url.Parse(q)
		name := "at"
		for k, v := range u.Query() {
			if len(v) == 1 && v[0] == "" {
				name = k
			}
		}
		wantProblem(t, e.get(t, e.admin, q+url.QueryEscape("9999-12-31T23:59:59-14:00")), http.StatusBadRequest, "query:"+name)
	}
	wantProblem(t, e.postJSON(t, e.admin, "/v1/instruments/photometer-7/predictions", map[string]any{"analyte": "nitrate",
		"at": "0000-01-01T00:00:00+14:00", "samples": []map[string]any{{"id": "W-1", "responses": []float64{1.5}}}}), http.StatusUnprocessableEntity, "/at")
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("refused requests changed the tables: %s", d)
	}
	if r := e.get(t, e.admin, "/v1/curves"); r.status != http.StatusOK {
		t.Errorf("GET /v1/curves after the refusals: %s", r)
	}

	// Accepted: within the skew, and the first representable instant (not
	// "required").
	for _, s := range []string{"2026-03-06T11:59:59Z", "0001-01-01T00:00:00Z"} {
		if r := e.postJSON(t, e.admin, "/v1/runs", at(s)); r.status != http.StatusCreated {
			t.Errorf("run acquired at %s: %s", s, r)
		}
	}
	if r := e.postJSON(t, e.admin, "/v1/runs/"+run.ID.String()+"/samples", late("2026-03-06T11:00:00Z")); r.status != http.StatusCreated {
		t.Errorf("late sample within the skew: %s", r)
	}
	if r := e.get(t, e.admin, "/v1/curves"); r.status != http.StatusOK {
		t.Errorf("GET /v1/curves after the accepted runs: %s", r)
	}
}

// TestRFC3339EdgeCases: RFC 3339 section 5.6 allows the separator T and the
// zone Z in lower case, so they are accepted wherever a time is (a JSON body,
// the CSV run's acquired_at, a query parameter) and read back as the same
// instant; a leap second (23:59:60) is refused with the field named and a
// sentence saying why, not the parser's message.
func TestRFC3339EdgeCases(t *testing.T) {
	t.Parallel()
	e := newEnvDB(t, api.Config{}, dbtest.NewDB(t))
	e.method(t, "nitrate-uv", "nitrate", "phosphate")
	at := func(s string) map[string]any {
		b := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 2))
		b["acquired_at"] = s
		return b
	}

	lower := e.run(t, e.admin, at("2026-03-02t08:00:00.5z"))
	got := decode[oapi.Run](t, e.get(t, e.admin, "/v1/runs/"+lower.ID.String()), http.StatusOK)
	if want := time.Date(2026, 3, 2, 8, 0, 0, 500_000_000, time.UTC); !got.AcquiredAt.Equal(want) {
		t.Errorf("run acquired at 2026-03-02t08:00:00.5z reads back as %s, want %s", got.AcquiredAt, want)
	}
	csv, _ := nitrateCSV(3)
	r := e.do(t, call{method: http.MethodPost, path: csvPath("nitrate-uv", "photometer-7", "2026-03-02t09:00:00+01:00"),
		token: e.admin, contentType: "text/csv", body: []byte(csv)})
	if r.status != http.StatusCreated {
		t.Errorf("CSV run acquired at 2026-03-02t09:00:00+01:00: %s", r)
	}
	curve := "/v1/curves/" + lower.Curves[0].ID.String()
	if r := e.postJSON(t, e.admin, curve+"/verifications", map[string]any{"kind": "continuing", "level": "CCV",
		"concentration": 2, "responses": []float64{1.04}, "acquired_at": "2026-03-02t10:00:00z"}); r.status != http.StatusCreated {
		t.Errorf("verification at 2026-03-02t10:00:00z: %s", r)
	}
	page := decode[oapi.CurveList](t, e.get(t, e.admin, "/v1/curves?from="+url.QueryEscape("2026-03-02t07:59:59z")), http.StatusOK)
	if len(page.Curves) != 2 {
		t.Errorf("curves from 2026-03-02t07:59:59z: %d, want the 2 posted", len(page.Curves))
	}

	before := e.counts(t)
	const leap = "2016-12-31T23:59:60Z" // a real leap second (IERS Bulletin C 52)
	leapMessage := func(p api.Problem) {
		t.Helper()
		if !strings.Contains(p.Detail, "leap second") || strings.Contains(p.Detail, "out of range") {
			t.Errorf("leap second refused with %q, want a sentence naming the leap second", p.Detail)
		}
	}
	leapMessage(wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", at(leap)), http.StatusUnprocessableEntity, "/acquired_at"))
	leapMessage(wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", at("2016-12-31t23:59:60.25z")), http.StatusUnprocessableEntity, "/acquired_at"))
	leapMessage(wantProblem(t, e.postJSON(t, e.admin, curve+"/verifications", map[string]any{"kind": "continuing", "level": "CCV",
		"concentration": 2, "responses": []float64{1.04}, "acquired_at": leap}), http.StatusUnprocessableEntity, "/acquired_at"))
	leapMessage(wantProblem(t, e.postJSON(t, e.admin, "/v1/runs/"+lower.ID.String()+"/samples", map[string]any{"samples": []map[string]any{
		{"id": "LATE-1", "analyte": "nitrate", "responses": []float64{1.5}, "acquired_at": leap}}}), http.StatusUnprocessableEntity, "/samples/0/acquired_at"))
	// Parameters: an invalid query parameter is a malformed request (400).
	leapMessage(wantProblem(t, e.do(t, call{method: http.MethodPost, path: csvPath("nitrate-uv", "photometer-7", leap),
		token: e.admin, contentType: "text/csv", body: []byte(csv)}), http.StatusBadRequest, "query:acquired_at"))
	leapMessage(wantProblem(t, e.get(t, e.admin, "/v1/curves?to="+url.QueryEscape(leap)), http.StatusBadRequest, "query:to"))
	// A leap second beside another breach is still a malformed body (400),
	// with both named.
	b := at(leap)
	delete(b, "method")
	wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", b), http.StatusBadRequest, "/acquired_at")
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("refused requests changed the tables: %s", d)
	}
}
