package api_test

import (
	"net/http"
	"testing"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// TestRecalculateEveryFixtureCurve refits every curve of the QA pages'
// fixture (an invented lab's history with one failing curve), plus an
// exclusion revision of the last one, from the stored readings with the
// running engine: each must come out identical to the stored fit, field by
// field.
func TestRecalculateEveryFixtureCurve(t *testing.T) {
	t.Parallel()
	e := newUIEnv(t, false)
	ids := append(append([]string{}, e.curves...), e.failing)
	var rev oapi.Curve
	e.api(t, e.tokens[lab.ScopeCurvesReview], http.MethodPost, "/v1/curves/"+e.curves[len(e.curves)-1]+"/exclusions",
		map[string]any{"points": []map[string]any{{"level": "Pb-3", "replicate": 1}}, "reason": "fixture: a bubble in the cell"},
		http.StatusCreated, &rev)
	ids = append(ids, rev.ID.String())
	for _, id := range ids {
		var rc oapi.Recalculation
		e.api(t, e.admin, http.MethodPost, "/v1/curves/"+id+"/recalculation", nil, http.StatusOK, &rc)
		if !rc.Identical || len(rc.Differences) != 0 || rc.RunningEngine == "" || rc.StoredEngine != rc.RunningEngine {
			t.Errorf("curve %s: identical %v, engines %s → %s, differences %+v", id, rc.Identical, rc.StoredEngine, rc.RunningEngine, rc.Differences)
		}
	}
	if len(ids) < 10 {
		t.Errorf("the fixture has only %d curves", len(ids))
	}
}
