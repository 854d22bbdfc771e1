package api_test

import (
	"encoding/json"
	"fmt"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
)

// TestFourPLEndToEnd: an administrator defines a 4PL method weighted 1/y²,
// a plate reader posts its run, the curve carries named parameters, the
// covariance, θ and the non-linear checks, and a prediction through the
// route matches scipy (testdata/golden/scipy_band_4pl.json, made by
// testdata/gen/make_golden_band.py: curve_fit and brentq on the inverted
// prediction band; tolerances as in calib's TestCurveReportBandInversionGolden).
func TestFourPLEndToEnd(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	raw, err := os.ReadFile(filepath.Join("..", "testdata", "golden", "scipy_band_4pl.json"))
	if err != nil {
		t.Fatal(err)
	}
	var g struct {
		Params      []float64 `json:"params"`
		Predictions []struct {
			Readings []float64 `json:"readings"`
			XHat     float64   `json:"x_hat"`
			Low      float64   `json:"low"`
			High     float64   `json:"high"`
		} `json:"predictions"`
	}
	if err := json.Unmarshal(raw, &g); err != nil {
		t.Fatal(err)
	}
	decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": "elisa-4pl", "model": "4pl",
		"weighting": "1/y^2", "analytes": []map[string]any{{"name": "cytokine-x", "unit": "ng/mL"}}}), http.StatusCreated)
	// A 4PL may not take a linear-only weighting.
	if r := e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": "elisa-bad", "model": "4pl",
		"weighting": "1/x^2", "analytes": []map[string]any{{"name": "cytokine-x", "unit": "ng/mL"}}}); r.status != http.StatusUnprocessableEntity && r.status != http.StatusBadRequest {
		t.Errorf("4pl with 1/x^2: %d %s", r.status, r.body)
	}
	xs := []float64{0.5, 1, 2.5, 5, 10, 25, 50, 100}
	ys := [][]float64{{0.081, 0.077}, {0.118, 0.124}, {0.236, 0.229}, {0.432, 0.447},
		{0.806, 0.781}, {1.542, 1.571}, {2.118, 2.071}, {2.452, 2.497}}
	var stds []map[string]any
	for i, x := range xs {
		stds = append(stds, map[string]any{"analyte": "cytokine-x", "level": fmt.Sprintf("C%d", i+1), "concentration": x, "responses": ys[i]})
	}
	run := e.run(t, e.admin, runBody("elisa-4pl", "plate-reader-2", baseTime, stds))
	id := run.Curves[0].ID.String()
	c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+id), http.StatusOK)
	if c.Model != "4pl" || c.Nonlinear == nil {
		t.Fatalf("model %s, nonlinear %+v", c.Model, c.Nonlinear)
	}
	nl := c.Nonlinear
	if fmt.Sprint(nl.ParameterNames) != "[a b c d]" || nl.Outcome != "converged" || nl.Theta != 1 || !nl.LogX || len(nl.Profile) != 33 {
		t.Errorf("nonlinear %+v", nl)
	}
	if len(c.Covariance) != 4 || len(c.Covariance[3]) != 4 {
		t.Errorf("covariance %v", c.Covariance)
	}
	for j, p := range g.Params {
		if math.Abs(c.Coefficients[j]-p) > 1e-6*math.Abs(p) {
			t.Errorf("%s = %v, scipy %v", nl.ParameterNames[j], c.Coefficients[j], p)
		}
	}
	seen := map[oapi.CheckName]bool{}
	for _, ck := range c.Checks {
		seen[ck.Name] = true
	}
	for _, n := range []oapi.CheckName{"convergence", "back_calculation", "monotonic", "lack_of_fit", "precision_profile", "min_levels"} {
		if !seen[n] {
			t.Errorf("no check %s", n)
		}
	}
	if c.Verdict != "pass" {
		t.Errorf("verdict %s", c.Verdict)
	}
	gp := g.Predictions[1]
	r := e.postJSON(t, e.admin, "/v1/curves/"+id+"/predictions", map[string]any{"samples": []map[string]any{{"id": "P1-A3", "responses": gp.Readings}}})
	got := decode[oapi.PredictionResponse](t, r, http.StatusOK)
	res := got.Results[0]
	if res.IntervalMethod != "band_inversion" || res.Concentration == nil || !res.Interval.Bounded {
		t.Fatalf("result %+v", res)
	}
	if math.Abs(*res.Concentration-gp.XHat) > 1e-6*gp.XHat || math.Abs(*res.Interval.Low-gp.Low) > 1e-5*gp.Low || math.Abs(*res.Interval.High-gp.High) > 1e-5*gp.High {
		t.Errorf("x̂0 %v [%v, %v], scipy %v [%v, %v]", *res.Concentration, *res.Interval.Low, *res.Interval.High, gp.XHat, gp.Low, gp.High)
	}
	// A response above the upper asymptote: no concentration, a flag.
	r = e.postJSON(t, e.admin, "/v1/curves/"+id+"/predictions", map[string]any{"samples": []map[string]any{{"id": "P1-H1", "responses": []float64{4}}}})
	got = decode[oapi.PredictionResponse](t, r, http.StatusOK)
	if res := got.Results[0]; res.Concentration != nil || len(res.Flags) == 0 || res.Flags[0] != "above_asymptote" {
		t.Errorf("above the asymptote: %+v", res)
	}
	if p := e.get(t, e.admin, "/v1/curves/"+id+"/plot.svg"); p.status != http.StatusOK || !strings.Contains(string(p.body), "four-parameter logistic") {
		t.Errorf("plot: %d %.300s", p.status, p.body)
	}
}
