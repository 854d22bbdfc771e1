package api_test

import (
	"net/http"
	"strings"
	"testing"
	"time"

	"curvekeeper/lab"
)

type trendBody struct {
	Points []struct {
		CurveID    string   `json:"curve_id"`
		Value      *float64 `json:"value"`
		Status     string   `json:"status"`
		Evaluated  bool     `json:"evaluated"`
		InBaseline bool     `json:"in_baseline"`
		Violations []string `json:"violations"`
	} `json:"points"`
	Baseline struct {
		Mean     *float64 `json:"mean"`
		SD       *float64 `json:"sd"`
		N        int      `json:"n"`
		CurveIDs []string `json:"curve_ids"`
	} `json:"baseline"`
	Limits *struct {
		Centre     float64 `json:"centre"`
		ActionLow  float64 `json:"action_low"`
		ActionHigh float64 `json:"action_high"`
	} `json:"limits"`
	Violations []struct {
		Rule     string   `json:"rule"`
		Reject   bool     `json:"reject"`
		CurveIDs []string `json:"curve_ids"`
	} `json:"violations"`
	Notes []string `json:"notes"`
}

func TestTrendAPI(t *testing.T) {
	e := newUIEnv(t, false)
	qa := e.tokens[lab.ScopeCurvesReview]
	path := "/v1/trends?instrument=" + uiInstrument + "&analyte=Pb"
	t.Run("series, baseline and the falling slope's violations", func(t *testing.T) {
		var tr trendBody
		e.api(t, e.tokens[lab.ScopeResultsRead], http.MethodGet, path+"&baseline=10", nil, http.StatusOK, &tr)
		if len(tr.Points) != uiDays+1 {
			t.Fatalf("%d points, want %d", len(tr.Points), uiDays+1)
		}
		// The baseline is the first ten approved curves: the steady days.
		if tr.Baseline.N != 10 || len(tr.Baseline.CurveIDs) != 10 || tr.Baseline.CurveIDs[0] != e.curves[0] || tr.Baseline.CurveIDs[9] != e.curves[9] {
			t.Errorf("baseline %+v, want the first ten curves", tr.Baseline)
		}
		if tr.Limits == nil || tr.Baseline.Mean == nil || tr.Limits.Centre != *tr.Baseline.Mean {
			t.Fatalf("limits %+v", tr.Limits)
		}
		rejects := map[string]bool{}
		for _, v := range tr.Violations {
			if v.Reject {
				rejects[v.Rule] = true
			}
		}
		// From day 10 the slope falls 1.5 % a day against a baseline SD of
		// about 0.35 %: beyond 3 SD within days, and below the mean from then on.
		for _, r := range []string{"1-3s", "2-2s", "4-1s"} {
			if !rejects[r] {
				t.Errorf("no %s violation; violations %+v", r, tr.Violations)
			}
		}
		last := tr.Points[uiDays-1]
		if !last.Evaluated || len(last.Violations) == 0 {
			t.Errorf("the newest curve %+v carries no violation", last)
		}
	})
	t.Run("a rejected curve is listed but not evaluated", func(t *testing.T) {
		e.api(t, qa, http.MethodPost, "/v1/curves/"+e.curves[uiDays-1]+"/review", map[string]any{"decision": "reject", "reason": "drift"}, http.StatusOK, nil)
		var tr trendBody
		e.api(t, qa, http.MethodGet, path, nil, http.StatusOK, &tr)
		p := tr.Points[uiDays-1]
		if p.Status != "rejected" || p.Evaluated || len(p.Violations) != 0 {
			t.Errorf("rejected point %+v", p)
		}
	})
	t.Run("no baseline in an empty window", func(t *testing.T) {
		var tr trendBody
		e.api(t, qa, http.MethodGet, path+"&from=2040-01-01T00:00:00Z", nil, http.StatusOK, &tr)
		if tr.Limits != nil || tr.Baseline.Mean != nil || len(tr.Violations) != 0 || len(tr.Notes) == 0 {
			t.Errorf("empty window: %+v", tr)
		}
	})
	t.Run("other parameters", func(t *testing.T) {
		for _, p := range lab.TrendParameters {
			e.api(t, qa, http.MethodGet, path+"&parameter="+p, nil, http.StatusOK, nil)
		}
	})
	t.Run("refusals", func(t *testing.T) {
		e.api(t, e.tokens[lab.ScopeRunsWrite], http.MethodGet, path, nil, http.StatusForbidden, nil)
		e.api(t, qa, http.MethodGet, "/v1/trends?instrument="+uiInstrument, nil, http.StatusBadRequest, nil)
		e.api(t, qa, http.MethodGet, path+"&parameter=colour", nil, http.StatusBadRequest, nil)
		e.api(t, qa, http.MethodGet, path+"&baseline=1", nil, http.StatusBadRequest, nil)
	})
	t.Run("control chart", func(t *testing.T) {
		b := e.api(t, qa, http.MethodGet, "/v1/trends/plot.svg?instrument="+uiInstrument+"&analyte=Pb", nil, http.StatusOK, nil)
		if !strings.Contains(string(b), "<svg") {
			t.Error("not an SVG")
		}
	})
}

type curveChecks struct {
	Verdict string `json:"verdict"`
	Checks  []struct {
		Name      string   `json:"name"`
		Passed    bool     `json:"passed"`
		Computed  bool     `json:"computed"`
		Mandatory bool     `json:"mandatory"`
		Statistic *float64 `json:"statistic"`
		Detail    string   `json:"detail"`
	} `json:"checks"`
}

func driftOf(t *testing.T, c curveChecks) (found bool, passed, mandatory bool, detail string) {
	t.Helper()
	for _, ch := range c.Checks {
		if ch.Name == "drift" {
			return true, ch.Passed, ch.Mandatory, ch.Detail
		}
	}
	return false, false, false, ""
}

func TestDriftCheckAtIngest(t *testing.T) {
	e := newUIEnv(t, false)
	read := e.tokens[lab.ScopeResultsRead]
	get := func(id string) curveChecks {
		var c curveChecks
		e.api(t, read, http.MethodGet, "/v1/curves/"+id, nil, http.StatusOK, &c)
		return c
	}
	t.Run("left out while history is short", func(t *testing.T) {
		for _, id := range e.curves[:10] { // fewer than 10 approved curves before each
			if found, _, _, _ := driftOf(t, get(id)); found {
				t.Errorf("curve %s has a drift check with under 10 approved predecessors", id)
			}
		}
	})
	t.Run("a falling slope fails the advisory check; the verdict stands", func(t *testing.T) {
		c := get(e.curves[uiDays-1])
		found, passed, mandatory, detail := driftOf(t, c)
		if !found || passed || mandatory || c.Verdict != "pass" {
			t.Errorf("drift found=%v passed=%v mandatory=%v verdict %s: %s", found, passed, mandatory, c.Verdict, detail)
		}
	})
	t.Run("a steady slope passes", func(t *testing.T) {
		id := e.postRun(t, uiStart.AddDate(0, 0, 40), uiSlope(0), []float64{0.5, 1, 2, 5, 10, 20, 50})
		// The newest approved curves are the falling ones; a slope back at the
		// start is far above their mean: it is judged against recent history.
		found, passed, _, detail := driftOf(t, get(id))
		if !found {
			t.Fatal("no drift check")
		}
		t.Logf("steady slope after the fall: passed=%v: %s", passed, detail)
	})
	t.Run("mandatory drift fails the verdict", func(t *testing.T) {
		e.api(t, e.admin, http.MethodPost, "/v1/methods", map[string]any{
			"name": uiMethod, "model": "linear", "weighting": "1/x^2",
			"analytes":   []map[string]string{{"name": "Pb", "unit": "ug/L"}},
			"acceptance": map[string]any{"mandatory": []string{"min_levels", "back_calculation", "r_squared", "mandel", "drift"}},
		}, http.StatusCreated, nil)
		id := e.postRun(t, uiStart.AddDate(0, 0, 41).Add(time.Hour), uiSlope(0)*0.8, []float64{0.5, 1, 2, 5, 10, 20, 50})
		c := get(id)
		found, passed, mandatory, detail := driftOf(t, c)
		if !found || passed || !mandatory || c.Verdict != "fail" {
			t.Errorf("drift found=%v passed=%v mandatory=%v verdict %s: %s", found, passed, mandatory, c.Verdict, detail)
		}
	})
}
