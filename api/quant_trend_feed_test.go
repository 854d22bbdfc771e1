package api_test

import (
	"encoding/json"
	"fmt"
	"math"
	"net/http"
	"testing"

	"curvekeeper/api/oapi"
)

// IS responses are trended like the slope: parameter is_response is the
// mean IS response of each curve's calibrators. Worked by hand: three runs
// whose six standards carry IS responses 1000, 1100, 900, 1050, 950, 1000
// scaled by 1, 0.9 and 0.8 have means 1000, 900 and 800, oldest first.
// The reported value of a result is on the change feed, equal to the
// result's own (ResultEvent.reported).
func TestISResponseTrendAndReportedOnFeed(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{
		"name": "lcms-trend", "model": "linear", "weighting": "none",
		"analytes": []map[string]any{{"name": "drug-a", "unit": "ng/mL", "quant": map[string]any{
			"internal_standard": "drug-a-d4", "reporting_limit": 1, "detection_limit": 0.3}}}}), http.StatusCreated)
	var runs []oapi.RunCreated
	for k, scale := range []float64{1, 0.9, 0.8} {
		var standards []map[string]any
		for i, c := range []float64{1, 2, 4, 8, 16, 32} {
			is := []float64{1000, 1100, 900, 1050, 950, 1000}[i] * scale
			standards = append(standards, map[string]any{"analyte": "drug-a", "level": fmt.Sprintf("L%d", i+1), "concentration": c,
				"responses": []float64{(0.1*c + 0.02 + 0.001*float64(i%2)) * is}, "is_responses": []float64{is}})
		}
		runs = append(runs, e.run(t, e.admin, map[string]any{"method": "lcms-trend", "instrument": "lcms-7",
			"acquired_at": fmt.Sprintf("2026-03-0%dT09:00:00Z", 2+k), "standards": standards,
			"samples": []map[string]any{{"id": fmt.Sprintf("S-%d", k), "analyte": "drug-a", "responses": []float64{0.52 * 1000 * scale},
				"is_responses": []float64{1000 * scale}}}}))
	}
	tr := decode[oapi.Trend](t, e.get(t, e.admin, "/v1/trends?instrument=lcms-7&analyte=drug-a&parameter=is_response"), http.StatusOK)
	if tr.Parameter != oapi.TrendParameterIsResponse || len(tr.Points) != 3 {
		t.Fatalf("trend %s with %d points, want is_response with 3", tr.Parameter, len(tr.Points))
	}
	for i, want := range []float64{1000, 900, 800} {
		if v := tr.Points[i].Value; v == nil || math.Abs(*v-want) > 1e-9 {
			t.Errorf("point %d = %v, want %g (mean of the calibrators' IS responses)", i, v, want)
		}
		if tr.Points[i].CurveID != runs[i].Curves[0].ID {
			t.Errorf("point %d is curve %s, want run %d's", i, tr.Points[i].CurveID, i)
		}
	}
	if r := e.get(t, e.admin, "/v1/trends/plot.svg?instrument=lcms-7&analyte=drug-a&parameter=is_response"); r.status != http.StatusOK {
		t.Errorf("trend plot: %d", r.status)
	}

	feed := decode[oapi.ResultFeed](t, e.get(t, e.admin, "/v1/results?limit=50"), http.StatusOK)
	res := decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+runs[0].ID.String()+"/results"), http.StatusOK)
	var got *oapi.ResultEvent
	for i := range feed.Events {
		if feed.Events[i].ResultID == res.Results[0].ID {
			got = &feed.Events[i]
		}
	}
	if got == nil || got.Reported == nil || res.Results[0].Reported == nil {
		t.Fatalf("feed event %+v of result %d has no reported value (result's: %+v)", got, res.Results[0].ID, res.Results[0].Reported)
	}
	a, _ := json.Marshal(got.Reported)
	b, _ := json.Marshal(res.Results[0].Reported)
	if string(a) != string(b) {
		t.Errorf("feed reported %s, result reported %s", a, b)
	}
	// x̂0 = (0.52 − 0.02)/0.1 ≈ 5 ng/mL (the fit is near, not exactly, that line): above the reporting limit, no qualifier.
	if math.Abs(got.Reported.Result-5) > 0.1 || len(got.Reported.Qualifiers) != 0 {
		t.Errorf("feed reported %+v, want about 5 ng/mL without a qualifier", got.Reported)
	}
}
