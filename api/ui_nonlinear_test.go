package api_test

import (
	"fmt"
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
	xs := []float64{0.5, 1, 2.5, 5, 10, 25, 50, 100}
	ys := [][]float64{{0.081, 0.077}, {0.118, 0.124}, {0.236, 0.229}, {0.432, 0.447},
		{0.806, 0.781}, {1.542, 1.571}, {2.118, 2.071}, {2.452, 2.497}}
	var stds []map[string]any
	for i, x := range xs {
		stds = append(stds, map[string]any{"analyte": "marker", "level": fmt.Sprintf("C%d", i+1), "concentration": x, "responses": ys[i]})
	}
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
