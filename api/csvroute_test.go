package api_test

import (
	"net/http"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
)

// TestCreateRunCsvRoute: POST /v1/runs/csv stores the CSV run as POST
// /v1/runs with Content-Type text/csv does (same curves, stored as csv), an
// Idempotency-Key replays across the two routes, the query parameters are
// required (400 naming each), and the route takes text/csv only (415).
func TestCreateRunCsvRoute(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	body, _ := nitrateCSV(5)
	path := "/v1/runs/csv" + strings.TrimPrefix(csvPath("nitrate-uv", "photometer-7", "2026-03-02T08:00:00Z"), "/v1/runs")
	csv := func(path, key string) reply {
		return e.do(t, call{method: http.MethodPost, path: path, token: e.admin, contentType: "text/csv", body: []byte(body),
			header: map[string]string{"Idempotency-Key": key}})
	}
	before := e.counts(t)
	r := csv(path, "csv-route-1")
	created := decode[oapi.RunCreated](t, r, http.StatusCreated)
	if len(created.Curves) != 1 || created.Curves[0].Analyte != "nitrate" || r.header.Get("Location") != "/v1/runs/"+created.ID.String() {
		t.Fatalf("created %+v, Location %q; want one nitrate curve at /v1/runs/{id}", created, r.header.Get("Location"))
	}
	run := decode[oapi.Run](t, e.get(t, e.admin, "/v1/runs/"+created.ID.String()), http.StatusOK)
	if run.Format != oapi.RunFormatCSV || len(run.Standards) == 0 {
		t.Errorf("stored run format %q with %d standards, want csv with its standards", run.Format, len(run.Standards))
	}
	// The same request on the other route, with the same key, is a replay.
	old := csvPath("nitrate-uv", "photometer-7", "2026-03-02T08:00:00Z")
	again := csv(old, "csv-route-1")
	replayed := decode[oapi.RunCreated](t, again, http.StatusCreated)
	if replayed.ID != created.ID || again.header.Get("Idempotency-Replayed") != "true" {
		t.Errorf("POST /v1/runs with the key: run %s replayed %q, want %s replayed", replayed.ID, again.header.Get("Idempotency-Replayed"), created.ID)
	}
	if got := e.counts(t); got["runs"] != before["runs"]+1 {
		t.Errorf("runs %d → %d, want one more", before["runs"], got["runs"])
	}
	// Query parameters are required; JSON is not this route's media type.
	missing := e.do(t, call{method: http.MethodPost, path: "/v1/runs/csv", token: e.admin, contentType: "text/csv", body: []byte(body)})
	if missing.status != http.StatusBadRequest || !strings.Contains(string(missing.body), "query:method") {
		t.Errorf("without query parameters: %s, want 400 naming query:method", missing)
	}
	asJSON := e.do(t, call{method: http.MethodPost, path: path, token: e.admin, contentType: "application/json", body: []byte(`{}`)})
	if asJSON.status != http.StatusUnsupportedMediaType {
		t.Errorf("JSON body: %s, want 415", asJSON)
	}
}
