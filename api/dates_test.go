package api_test

import (
	"net/http"
	"net/url"
	"testing"
	"time"

	"curvekeeper/api"
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
