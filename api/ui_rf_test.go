package api_test

import (
	"net/http"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// The curve page of an average RF curve shows its response factors (the
// worked example of rfStandards: RF̄ 1, %RSD 7.1), the equation through
// the origin with slope RF̄, and its plot and printable record render.
func TestUIAverageRFCurvePage(t *testing.T) {
	e := newUIEnv(t, false)
	e.api(t, e.admin, http.MethodPost, "/v1/methods", map[string]any{"name": "lcms-rf", "model": "average_rf", "weighting": "none",
		"analytes": []map[string]any{{"name": "drug-a", "unit": "ng/mL", "quant": map[string]any{"internal_standard": "drug-a-d4"}}}},
		http.StatusCreated, nil)
	var run oapi.RunCreated
	e.api(t, e.admin, http.MethodPost, "/v1/runs", map[string]any{"method": "lcms-rf", "instrument": "lcms-1",
		"acquired_at": "2026-03-06T09:00:00Z", "standards": rfStandards("drug-a")}, http.StatusCreated, &run)
	id := run.Curves[0].ID.String()
	b := e.browser(t)
	b.mustSignIn(e.tokens[lab.ScopeCurvesReview])
	p := b.get("/ui/curves/" + id)
	if p.status != http.StatusOK {
		t.Fatalf("curve page: %d", p.status)
	}
	for _, want := range []string{`id="response-factors"`, "RF̄ = 1 (average response factor)", "%RSD 7.1 against at most 20 %",
		"<th scope=\"row\">L2</th><td class=\"num\">1.100</td><td class=\"num\">110.0</td>"} {
		if !strings.Contains(p.body, want) {
			i := strings.Index(p.body, `id="rf-h"`)
			t.Errorf("curve page lacks %q in %s", want, p.body[i:min(len(p.body), i+1500)])
		}
	}
	for _, path := range []string{"/ui/curves/" + id + "/plot.svg"} {
		if r := b.get(path); r.status != http.StatusOK || !strings.Contains(r.body, "average response factor") {
			t.Errorf("%s: %d, legend naming the model: %v", path, r.status, strings.Contains(r.body, "average response factor"))
		}
	}
	e.api(t, e.admin, http.MethodGet, "/v1/curves/"+id+"/record.pdf", nil, http.StatusOK, nil)
}
