package api_test

import (
	"net/http"
	"strings"
	"testing"
	"time"
)

// TestUnknownQueryParametersRefused: a query parameter the operation does not
// declare is a 400 naming it, never silently ignored (a misspelt filter would
// return everything; an old pagination name would return page 1 forever).
func TestUnknownQueryParametersRefused(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	_, lims := e.token(t, "lims-q", "results:read")
	tests := []struct {
		name, path string
		want       []string // pointers the problem must name
	}{
		{"typo in a filter", "/v1/curves?instrumnt=photometer-7", []string{"query:instrumnt"}},
		{"the feed's old cursor name", "/v1/results?since=AAAA", []string{"query:since"}},
		{"two unknown", "/v1/curves?limit=3&page=2&sort=asc", []string{"query:page", "query:sort"}},
		{"a route without query parameters", "/v1/methods?x=1", []string{"query:x"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			token := lims
			if strings.HasPrefix(tt.path, "/v1/methods") {
				token = e.admin
			}
			r := e.get(t, token, tt.path)
			p := wantProblem(t, r, http.StatusBadRequest, "")
			if got := pointers(p); strings.Join(got, ",") != strings.Join(tt.want, ",") {
				t.Errorf("problem names %v, want %v", got, tt.want)
			}
			for _, f := range p.Errors {
				if !strings.Contains(f.Detail, "unknown query parameter") {
					t.Errorf("%s: detail %q does not say the parameter is unknown", f.Pointer, f.Detail)
				}
			}
		})
	}
	// Declared parameters still pass.
	for _, path := range []string{"/v1/curves?instrument=photometer-7&limit=3", "/v1/results?limit=5"} {
		if r := e.get(t, lims, path); r.status != http.StatusOK {
			t.Errorf("GET %s → %s", path, r)
		}
	}
}

// TestPagesOneConvention: every paged list answers has_more and next_cursor,
// and takes the next page as cursor.
func TestPagesOneConvention(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	run := e.nitrateCurve(t)
	for _, id := range []string{"S-1", "S-2"} {
		r := e.postJSON(t, e.admin, "/v1/runs/"+run.ID.String()+"/samples", map[string]any{"samples": []map[string]any{
			{"id": id, "analyte": "nitrate", "responses": []float64{0.5}}}})
		if r.status != http.StatusCreated {
			t.Fatalf("samples: %s", r)
		}
	}
	e.run(t, e.admin, runBody("nitrate-uv", "photometer-7", baseTime.Add(time.Hour), standards("nitrate", 2)))
	_, lims := e.token(t, "lims-p", "results:read")
	type page struct {
		NextCursor *string `json:"next_cursor"`
		HasMore    *bool   `json:"has_more"`
	}
	for _, list := range []string{"/v1/curves", "/v1/results"} {
		t.Run(list, func(t *testing.T) {
			first := decode[page](t, e.get(t, lims, list+"?limit=1"), http.StatusOK)
			if first.HasMore == nil || !*first.HasMore || first.NextCursor == nil {
				t.Fatalf("first page of 1 out of several: has_more %v, next_cursor %v", first.HasMore, first.NextCursor)
			}
			second := decode[page](t, e.get(t, lims, list+"?limit=1&cursor="+*first.NextCursor), http.StatusOK)
			if second.HasMore == nil {
				t.Fatal("second page without has_more")
			}
		})
	}
}
