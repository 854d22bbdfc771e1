package api_test

import (
	"net/http"
	"strings"
	"testing"
)

// TestErrorsSayWhatAndWhere: each of these mistakes, met by people trying
// the service, gets a message that says what was expected and where (the
// line and column of a CSV body), instead of a parser's or a validator's
// words (a regular expression, "doesn't match all schemas from allOf", "8
// fields, the header has 7" alone, a JSON pointer into a run the CSV never
// showed, the correct lines blamed for a typo).
func TestErrorsSayWhatAndWhere(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	const head = "kind,analyte,level,concentration,response,sample_id,dilution\n"
	csvRun := func(body string) reply {
		return e.do(t, call{method: http.MethodPost, path: "/v1/runs/csv?method=nitrate-uv&instrument=photometer-7&acquired_at=2026-03-02T08:00:00Z",
			token: e.admin, contentType: "text/csv", body: []byte(head + body)})
	}
	badDate := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))
	badDate["acquired_at"] = "2026-13-01T08:00:00Z"
	curve := "/v1/curves/" + e.nitrateCurve(t).Curves[0].ID.String()
	for _, c := range []struct {
		name    string
		r       reply
		status  int
		pointer string
		want    []string
	}{
		{"a CSV sent as JSON", e.do(t, call{method: http.MethodPost, path: "/v1/runs", token: e.admin, contentType: "application/json",
			body: []byte(head + "standard,nitrate,L1,0.5,0.0102,,\n")}),
			http.StatusBadRequest, "/", []string{"not JSON (line 1, column 1", "looks like CSV", "POST /v1/runs/csv"}},
		{"a date out of the calendar", e.postJSON(t, e.admin, "/v1/runs", badDate),
			http.StatusBadRequest, "/acquired_at", []string{"RFC 3339 date-time", "2026-03-02T08:00:00Z"}},
		{"a curve id that is no UUID", e.get(t, e.admin, "/v1/curves/not-a-uuid"),
			http.StatusBadRequest, "path:id", []string{"must be a UUID such as"}},
		{"an empty reason", e.postJSON(t, e.admin, curve+"/exclusions", map[string]any{"reason": "", "points": []map[string]any{{"level": "L2", "replicate": 1}}}),
			http.StatusBadRequest, "/reason", []string{"must not be empty"}},
		{"a decimal comma in a CSV", csvRun("standard,nitrate,L1,0,5,0.0102,,\n"),
			http.StatusUnprocessableEntity, "/lines/2", []string{"8 fields, the header has 7", `"0,5" looks like a number with a decimal comma`, "0.5"}},
		{"an analyte typo in a CSV", csvRun("standard,nitrate,L1,0.5,0.0102,,\nstandard,nitrate,L2,1.0,0.0205,,\nstandard,nitrat,L3,2.0,0.0411,,\n"),
			http.StatusUnprocessableEntity, "/lines/4/analyte", []string{`does not list the analyte "nitrat"`}},
		{"a changed concentration on the first replicate", csvRun("standard,nitrate,L1,5.0,0.0102,,\nstandard,nitrate,L1,0.5,0.0098,,\nstandard,nitrate,L1,0.5,0.0101,,\nstandard,nitrate,L2,1.0,0.0205,,\n"),
			http.StatusUnprocessableEntity, "/lines/2/concentration", []string{"concentration 5 differs from 0.5 given on lines 3 and 4"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			p := wantProblem(t, c.r, c.status, c.pointer)
			for _, w := range c.want {
				if !strings.Contains(p.Detail, w) {
					t.Errorf("detail %q lacks %q", p.Detail, w)
				}
			}
			if strings.Contains(p.Detail, "^[") || strings.Contains(p.Detail, "allOf") {
				t.Errorf("detail %q still speaks the validator's language", p.Detail)
			}
		})
	}
}
