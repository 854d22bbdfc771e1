package api_test

import (
	"net/http"
	"strings"
	"testing"
	"time"

	"curvekeeper/lab"
)

// TestUIFourPLCurvePage: the QA page of a 4PL curve shows its equation
// with named parameters and draws its plot.
func TestUIFourPLCurvePage(t *testing.T) {
	e := newUIEnv(t, false)
	e.api(t, e.admin, http.MethodPost, "/v1/methods", map[string]any{"name": "ui-4pl", "model": "4pl", "weighting": "power_of_mean",
		"analytes": []map[string]any{{"name": "marker", "unit": "ng/mL"}}}, http.StatusCreated, nil)
	stds := elisaStandards("marker")
	var run struct {
		Curves []struct {
			ID string `json:"id"`
		} `json:"curves"`
	}
	e.api(t, e.tokens[lab.ScopeRunsWrite], http.MethodPost, "/v1/runs", map[string]any{"method": "ui-4pl", "instrument": "plate-9",
		"acquired_at": time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC).Format(time.RFC3339), "standards": stds}, http.StatusCreated, &run)
	b := e.browser(t)
	b.mustSignIn(e.tokens[lab.ScopeResultsRead])
	p := b.get("/ui/curves/" + run.Curves[0].ID)
	if p.status != http.StatusOK || !strings.Contains(p.body, "(x/c)^b); a = ") || !strings.Contains(p.body, "θ = ") {
		i := strings.Index(p.body, "<dt>Equation")
		t.Errorf("curve page %d: no 4PL equation with parameters and θ: %.300s", p.status, p.body[max(i, 0):])
	}
}
