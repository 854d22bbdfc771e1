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
	"time"

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
	stds := elisaStandards("cytokine-x")
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

// TestMethodCurveParameters: a method fixes a 4PL's lower asymptote and
// seeds its inflection through curve_parameters; the method echoes them,
// posting the same definition again makes no new revision, and the run's
// curve holds a at exactly the fixed value (one more degree of freedom,
// no standard error) with its start and fixed flags in the nonlinear
// details. Names outside the model, a straight line with parameters and a
// coefficient both started and fixed are refused with 422.
func TestMethodCurveParameters(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	analytes := []map[string]any{{"name": "cytokine-x", "unit": "ng/mL"}}
	body := map[string]any{"name": "elisa-fixed-a", "model": "4pl", "weighting": "1/y^2", "analytes": analytes,
		"curve_parameters": map[string]any{"fixed": map[string]float64{"a": 0.04}, "start": map[string]float64{"c": 60}}}
	m := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusCreated)
	if cp := m.CurveParameters; cp.Fixed == nil || cp.Fixed.A == nil || *cp.Fixed.A != 0.04 || cp.Start == nil || cp.Start.C == nil || *cp.Start.C != 60 || cp.Start.A != nil {
		t.Errorf("curve_parameters %+v", m.CurveParameters)
	}
	again := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusOK)
	if again.Revision != m.Revision {
		t.Errorf("the same definition made revision %d", again.Revision)
	}
	stds := elisaStandards("cytokine-x")
	run := e.run(t, e.admin, runBody("elisa-fixed-a", "plate-reader-3", baseTime, stds))
	c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()), http.StatusOK)
	nl := c.Nonlinear
	if nl == nil || nl.Outcome != "converged" {
		t.Fatalf("nonlinear %+v", nl)
	}
	if c.Coefficients[0] != 0.04 || c.StandardErrors[0] != 0 || c.Df != 16-3 {
		t.Errorf("a = %v (SE %v), df %d; want a = 0.04 exactly, SE 0, df 13", c.Coefficients[0], c.StandardErrors[0], c.Df)
	}
	if nl.Fixed == nil || fmt.Sprint(*nl.Fixed) != "[true false false false]" || nl.Start == nil || (*nl.Start)[2] != 60 || (*nl.Start)[0] != 0.04 {
		t.Errorf("fixed %v start %v", nl.Fixed, nl.Start)
	}
	for _, bad := range []map[string]any{
		{"name": "elisa-bad-g", "model": "4pl", "weighting": "none", "analytes": analytes,
			"curve_parameters": map[string]any{"fixed": map[string]float64{"g": 1}}},
		{"name": "line-bad", "model": "linear", "weighting": "none", "analytes": analytes,
			"curve_parameters": map[string]any{"start": map[string]float64{"a": 1}}},
		{"name": "elisa-bad-both", "model": "4pl", "weighting": "none", "analytes": analytes,
			"curve_parameters": map[string]any{"start": map[string]float64{"a": 1}, "fixed": map[string]float64{"a": 1}}},
	} {
		if r := e.postJSON(t, e.admin, "/v1/methods", bad); r.status != http.StatusUnprocessableEntity || !strings.Contains(string(r.body), "curve_parameters") {
			t.Errorf("%v: %d %s", bad["name"], r.status, r.body)
		}
	}
}

// elisaStandards is an invented 4PL immunoassay's calibrators for analyte:
// 8 levels in duplicate wells (calib's elisaCurve).
func elisaStandards(analyte string) []map[string]any {
	xs := []float64{0.5, 1, 2.5, 5, 10, 25, 50, 100}
	ys := [][]float64{{0.081, 0.077}, {0.118, 0.124}, {0.236, 0.229}, {0.432, 0.447},
		{0.806, 0.781}, {1.542, 1.571}, {2.118, 2.071}, {2.452, 2.497}}
	var stds []map[string]any
	for i, x := range xs {
		stds = append(stds, map[string]any{"analyte": analyte, "level": fmt.Sprintf("C%d", i+1), "concentration": x, "responses": ys[i]})
	}
	return stds
}

// TestTrendFourPLParameters: the trends route follows a 4PL's coefficients
// by name. Three invented plates whose top asymptote rises 4 % a plate give
// three points per parameter, each equal to that curve's stored
// coefficient (d rising plate to plate); the straight line's slope has no
// value on these curves, and the notes say so.
func TestTrendFourPLParameters(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": "elisa-trend", "model": "4pl",
		"weighting": "1/y^2", "analytes": []map[string]any{{"name": "cytokine-x", "unit": "ng/mL"}}}), http.StatusCreated)
	var curves []oapi.Curve
	for day := range 3 {
		stds := elisaStandards("cytokine-x")
		for _, s := range stds {
			rs := s["responses"].([]float64)
			scaled := make([]float64, len(rs))
			for i, v := range rs {
				scaled[i] = v * (1 + 0.04*float64(day)*v/2.5) // the top rises, the bottom barely moves
			}
			s["responses"] = scaled
		}
		run := e.run(t, e.admin, runBody("elisa-trend", "plate-reader-9", baseTime.Add(time.Duration(day)*24*time.Hour), stds))
		curves = append(curves, decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()), http.StatusOK))
	}
	path := "/v1/trends?instrument=plate-reader-9&analyte=cytokine-x&parameter="
	for j, name := range []string{"a", "b", "c", "d"} {
		tr := decode[trendBody](t, e.get(t, e.admin, path+name), http.StatusOK)
		if len(tr.Points) != 3 {
			t.Fatalf("%s: %d points", name, len(tr.Points))
		}
		for i, p := range tr.Points {
			if p.CurveID != curves[i].ID.String() || p.Value == nil || *p.Value != curves[i].Coefficients[j] {
				t.Errorf("%s point %d: %+v, want curve %s value %v", name, i, p, curves[i].ID, curves[i].Coefficients[j])
			}
		}
		if name == "d" && !(*tr.Points[0].Value < *tr.Points[1].Value && *tr.Points[1].Value < *tr.Points[2].Value) {
			t.Errorf("d does not rise plate to plate: %v %v %v", *tr.Points[0].Value, *tr.Points[1].Value, *tr.Points[2].Value)
		}
	}
	tr := decode[trendBody](t, e.get(t, e.admin, path+"slope"), http.StatusOK)
	if len(tr.Points) != 3 || tr.Points[0].Value != nil || len(tr.Notes) == 0 {
		t.Errorf("slope of a 4PL: %+v", tr)
	}
}
