package api_test

import (
	"math"
	"net/http"
	"testing"

	"curvekeeper/api/oapi"
)

// rfStandards is the worked example of the average response factor model
// with an internal standard, computed by hand (US EPA SW-846 8000 §11.4.3,
// as transcribed): the standards' response ratios A_x/A_is at 1, 2, 5, 10,
// 20, 50 ng/mL are 1, 2.2, 4.5, 10.5, 19, 50 while the IS responses vary, so
//
//	RF_i = ratio/c = 1.00, 1.10, 0.90, 1.05, 0.95, 1.00;  RF̄ = 6/6 = 1
//	deviations 0, .1, −.1, .05, −.05, 0: Σ² = 0.025, s² = 0.025/5 = 0.005
//	s_RF = 0.0707106781;  %RSD = 7.07106781 % (≤ 20 %: linear)
//
// plus a blank (0 ng/mL), which gives no RF. A sample of ratio 7.5 (one
// reading) reads x̂0 = 7.5/1 = 7.5 ng/mL with
//
//	u(x̂0) = 7.5·(s_RF/RF̄)·√(1/1 + 1/6) = 0.5728219619
//	95 % interval 7.5/(1 ± t·s_RF·√(7/6)), t(0.975, 5) = 2.5705818366 (t table):
//	half = 0.19633143, interval 6.2691657 to 9.3322052.
func rfStandards(analyte string) []map[string]any {
	concs := []float64{0, 1, 2, 5, 10, 20, 50}
	ratios := []float64{0.002, 1, 2.2, 4.5, 10.5, 19, 50}
	is := []float64{1000, 1000, 1100, 900, 1000, 1050, 950}
	var out []map[string]any
	for i, c := range concs {
		out = append(out, map[string]any{"analyte": analyte, "level": "L" + string(rune('0'+i)),
			"concentration": c, "responses": []float64{ratios[i] * is[i]}, "is_responses": []float64{is[i]}})
	}
	return out
}

// The average RF model chosen for one analyte of a method whose other
// analyte is fitted by a line: the curve, its checks, a prediction and a
// stored result against the worked example of rfStandards.
func TestAverageRFThroughTheAPI(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	m := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{
		"name": "lcms-rf", "model": "linear", "weighting": "1/x",
		"analytes": []map[string]any{
			{"name": "drug-a", "unit": "ng/mL", "model": "average_rf", "quant": map[string]any{"internal_standard": "drug-a-d4"}},
			{"name": "drug-b", "unit": "ng/mL"}}}), http.StatusCreated)
	if m.Analytes[0].Model == nil || *m.Analytes[0].Model != oapi.ModelAverageRF || m.Analytes[1].Model != nil {
		t.Fatalf("analyte models %v %v, want average_rf and the method's", m.Analytes[0].Model, m.Analytes[1].Model)
	}
	if m.Acceptance.MaxRfRsdPct != 20 {
		t.Errorf("max_rf_rsd_pct %v, want the default 20", m.Acceptance.MaxRfRsdPct)
	}
	standards := rfStandards("drug-a")
	for i, c := range []float64{1, 2, 5, 10, 20, 50} {
		standards = append(standards, map[string]any{"analyte": "drug-b", "level": "B" + string(rune('1'+i)),
			"concentration": c, "responses": []float64{3*c + 1}})
	}
	run := e.run(t, e.admin, map[string]any{"method": "lcms-rf", "instrument": "lcms-1",
		"acquired_at": "2026-03-06T09:00:00Z", "standards": standards,
		"samples": []map[string]any{{"id": "S-1", "analyte": "drug-a", "responses": []float64{7.5 * 800}, "is_responses": []float64{800}}}})
	near := func(what string, got, want, tol float64) {
		t.Helper()
		if math.Abs(got-want) > tol {
			t.Errorf("%s = %.10g, want %.10g (worked by hand)", what, got, want)
		}
	}
	var rfID, lineID string
	for _, c := range run.Curves {
		if c.Analyte == "drug-a" {
			rfID = c.ID.String()
		} else {
			lineID = c.ID.String()
		}
	}
	line := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+lineID), http.StatusOK)
	if line.Model != oapi.ModelLinear || line.ResponseFactors != nil {
		t.Errorf("drug-b model %s with response factors %v, want the method's linear", line.Model, line.ResponseFactors)
	}
	c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+rfID), http.StatusOK)
	if c.Model != oapi.ModelAverageRF || c.ResponseFactors == nil || len(c.Coefficients) != 1 {
		t.Fatalf("curve model %s, response factors %v, coefficients %v", c.Model, c.ResponseFactors, c.Coefficients)
	}
	rf := c.ResponseFactors
	near("RF̄", rf.Mean, 1, 1e-12)
	near("slope", c.Coefficients[0], 1, 1e-12)
	near("s_RF", rf.Sd, math.Sqrt(0.005), 1e-12)
	near("%RSD", rf.RsdPct, 7.07106781187, 1e-8)
	if rf.K != 6 || rf.Blanks != 1 || rf.MaxRsdPct != 20 || len(rf.Rfs) != 6 {
		t.Errorf("k %d blanks %d limit %v rfs %v, want 6, 1, 20 and six RFs", rf.K, rf.Blanks, rf.MaxRsdPct, rf.Rfs)
	}
	for i, want := range []float64{1, 1.1, 0.9, 1.05, 0.95, 1} {
		near("RF "+rf.Levels[i], rf.Rfs[i], want, 1e-12)
	}
	var rsd *oapi.Check
	for i := range c.Checks {
		if c.Checks[i].Name == oapi.CheckRfRsd {
			rsd = &c.Checks[i]
		}
	}
	if rsd == nil || !rsd.Passed || !rsd.Mandatory {
		t.Fatalf("rf_rsd check %+v, want passed and mandatory", rsd)
	}
	if c.Verdict != oapi.VerdictPass {
		t.Errorf("verdict %s: %+v", c.Verdict, c.Checks)
	}

	// Fitted again from the stored run, the curve is the same.
	rc := decode[oapi.Recalculation](t, e.postJSON(t, e.admin, "/v1/curves/"+rfID+"/recalculation", nil), http.StatusOK)
	if !rc.Identical || len(rc.Differences) != 0 {
		t.Errorf("recalculation of the average RF curve differs: %+v", rc.Differences)
	}

	// A prediction from the ratio, and the stored result from the sample's
	// readings (ratio 6000/800 = 7.5), give the worked example's numbers.
	pr := decode[oapi.PredictionResponse](t, e.postJSON(t, e.admin, "/v1/curves/"+rfID+"/predictions",
		map[string]any{"samples": []map[string]any{{"id": "P-1", "responses": []float64{7.5}}}}), http.StatusOK)
	p := pr.Results[0]
	if p.Concentration == nil || p.StandardError == nil || !p.Interval.Bounded || p.IntervalMethod != "average_rf_t_pivot" {
		t.Fatalf("prediction %+v", p)
	}
	near("x̂0", *p.Concentration, 7.5, 1e-12)
	near("u(x̂0)", *p.StandardError, 0.5728219619, 1e-9)
	near("low", *p.Interval.Low, 6.2691657, 1e-6)
	near("high", *p.Interval.High, 9.3322052, 1e-6)
	res := decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+run.ID.String()+"/results"), http.StatusOK)
	if len(res.Results) != 1 || res.Results[0].Concentration == nil || res.Results[0].StandardError == nil {
		t.Fatalf("results %+v", res.Results)
	}
	near("result x̂0", *res.Results[0].Concentration, 7.5, 1e-12)
	near("result u(x̂0)", *res.Results[0].StandardError, 0.5728219619, 1e-9)

	// A method whose limit is 7 % fails the same RFs (%RSD 7.07).
	decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{
		"name": "lcms-rf7", "model": "average_rf", "weighting": "none", "acceptance": map[string]any{"max_rf_rsd_pct": 7},
		"analytes": []map[string]any{{"name": "drug-a", "unit": "ng/mL", "quant": map[string]any{"internal_standard": "drug-a-d4"}}}}), http.StatusCreated)
	run7 := e.run(t, e.admin, map[string]any{"method": "lcms-rf7", "instrument": "lcms-1",
		"acquired_at": "2026-03-06T10:00:00Z", "standards": rfStandards("drug-a")})
	c7 := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+run7.Curves[0].ID.String()), http.StatusOK)
	if c7.Verdict != oapi.VerdictFail || c7.ResponseFactors == nil || c7.ResponseFactors.MaxRsdPct != 7 {
		t.Errorf("verdict %s with limit %v, want fail at 7 %%", c7.Verdict, c7.ResponseFactors)
	}
}
