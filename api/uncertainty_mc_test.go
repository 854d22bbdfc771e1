package api_test

import (
	"fmt"
	"math"
	"net/http"
	"reflect"
	"strings"
	"testing"
	"time"

	"curvekeeper/api/oapi"
	"curvekeeper/export"
)

// weakRun posts a method with a two-term budget, an upper limit with the
// guard band and the given Monte Carlo setting ("" for the default), and a
// run of the weak line with one sample; it returns the run.
func weakRun(t *testing.T, e *env, name, setting string) oapi.RunCreated {
	t.Helper()
	u := map[string]any{"terms": []string{"calibration", "recovery"},
		"recovery": map[string]any{"mean": 0.98, "std_uncertainty": 0.02, "df": 10},
		"limits":   map[string]any{"upper": 5.0, "rule": "guard_band_u"}}
	if setting != "" {
		u["monte_carlo"] = setting
	}
	decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": name, "model": "linear", "weighting": "none",
		"analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L", "uncertainty": u}}}), http.StatusCreated)
	stds := make([]map[string]any, 0, len(weakLevels))
	for i, x := range weakLevels {
		stds = append(stds, map[string]any{"analyte": "nitrate", "level": fmt.Sprintf("L%d", i+1), "concentration": x, "responses": weakResponses[i]})
	}
	body := runBody(name, "photometer-7", baseTime, stds)
	body["samples"] = []map[string]any{{"id": "W-1", "analyte": "nitrate", "responses": weakSample}}
	return e.run(t, e.admin, body)
}

// weakLevels and weakResponses are an invented straight line whose slope is
// weakly determined: b1 ≈ 0.0038 against s(y/x) ≈ 0.0043, Fieller's
// g = t²·s²(b1)/b1² ≈ 0.18 (hand computation with t(0.975; 10) = 2.228),
// above the screen's 0.05.
var (
	weakLevels    = []float64{1, 2, 3, 4, 5, 6}
	weakResponses = [][]float64{{0.108, 0.101}, {0.103, 0.114}, {0.114, 0.108}, {0.121, 0.114}, {0.114, 0.123}, {0.125, 0.123}}
	weakSample    = []float64{0.108, 0.109}
)

// TestMonteCarloByDefaultWhereGUMInDoubt checks the method's automatic
// Monte Carlo check (JCGM 101) on a weakly determined slope: the screen
// fires, the check runs with at least 10⁵ draws and a seed derived from
// the curve and the sample (the same seed, and the same interval, for the
// stored result, for the prediction and for the prediction again; another
// seed for other readings), and, as the ratio x̂0 is skewed here, the check
// disagrees with y ± U, so the result reports the Monte Carlo interval and
// its conformity uses it. With on_request nothing runs by itself.
func TestMonteCarloByDefaultWhereGUMInDoubt(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	run := weakRun(t, e, "nitrate-weak", "")
	curve := "/v1/curves/" + run.Curves[0].ID.String() + "/predictions"
	predict := func(responses []float64) *oapi.UncertaintyBudget {
		t.Helper()
		p := decode[oapi.PredictionResponse](t, e.postJSON(t, e.admin, curve,
			map[string]any{"samples": []map[string]any{{"id": "W-1", "responses": responses}}}), http.StatusOK)
		if p.Results[0].Uncertainty == nil {
			t.Fatalf("no budget: %+v", p.Results[0])
		}
		return p.Results[0].Uncertainty
	}
	b := predict(weakSample)
	m := b.MonteCarlo
	if m == nil || m.Trigger == nil || *m.Trigger != oapi.MCTriggerScreened || m.Screen == nil || !strings.Contains(*m.Screen, "Fieller") {
		t.Fatalf("Monte Carlo %+v, want one the screen ran for the weak slope", m)
	}
	if m.Draws < 100000 || m.Seed <= 0 {
		t.Errorf("draws %d, seed %d: want at least 10⁵ draws and the derived seed", m.Draws, m.Seed)
	}
	ri := b.ReportedInterval
	if m.Agrees || ri == nil || ri.Method != oapi.ReportedMonteCarlo || ri.Low != m.Low || ri.High != m.High {
		t.Fatalf("reported interval %+v with Monte Carlo %+v: want the Monte Carlo interval reported", ri, m)
	}
	// The Monte Carlo interval of the skewed ratio is not y ± U (GUM kept beside it).
	if asym := math.Abs((m.High - b.Value) - (b.Value - m.Low)); asym < 0.05*(m.High-m.Low) {
		t.Errorf("Monte Carlo interval [%v, %v] about y = %v: want the asymmetry of the ratio", m.Low, m.High, b.Value)
	}
	c := b.Conformity
	if c == nil || !strings.Contains(c.Statement, "Monte Carlo 95 % coverage interval "+ri.LowText+" to "+ri.HighText) ||
		c.AcceptHigh == nil || *c.AcceptHigh != 5.0-(ri.High-b.Value) {
		t.Errorf("conformity %+v: want it stated on the Monte Carlo interval [%s, %s]", c, ri.LowText, ri.HighText)
	}
	if again := predict(weakSample); !reflect.DeepEqual(again, b) {
		t.Errorf("the same sample gave\n%+v\nthen\n%+v", b.MonteCarlo, again.MonteCarlo)
	}
	if other := predict([]float64{0.110, 0.112}); other.MonteCarlo == nil || other.MonteCarlo.Seed == m.Seed {
		t.Errorf("other readings: Monte Carlo %+v, want one with another seed than %d", other.MonteCarlo, m.Seed)
	}
	rs := decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+run.ID.String()+"/results"), http.StatusOK)
	stored := rs.Results[0].Uncertainty
	if stored == nil || stored.MonteCarlo == nil || stored.ReportedInterval == nil {
		t.Fatalf("stored result's budget %+v: want the Monte Carlo check and the reported interval", stored)
	}
	if stored.MonteCarlo.Seed != m.Seed || stored.ReportedInterval.LowText != ri.LowText || stored.ReportedInterval.HighText != ri.HighText ||
		stored.Conformity == nil || stored.Conformity.Statement != c.Statement {
		t.Errorf("stored %+v / %+v, predicted %+v / %+v: want the same check and statement", stored.MonteCarlo, stored.ReportedInterval, m, ri)
	}
	// The exports carry the reported interval: CSV in its columns, HL7 v2
	// as the NTE's uncertainty (y ± U beside it), FHIR in a note.
	path := "/v1/runs/" + run.ID.String() + "/results"
	want := export.IntervalStatement(ri.LowText, ri.HighText, "mg/L", 0.95)
	for accept, wants := range map[string][]string{
		"text/csv":                 {"monte_carlo," + ri.LowText + "," + ri.HighText},
		"x-application/hl7-v2+er7": {want, "GUM beside it: Expanded uncertainty U = " + stored.ExpandedText},
		"application/fhir+json":    {"Reported: " + want},
	} {
		r := e.do(t, call{method: http.MethodGet, path: path, token: e.admin, header: map[string]string{"Accept": accept}})
		for _, w := range wants {
			if !strings.Contains(string(r.body), w) {
				t.Errorf("%s lacks %q:\n%s", accept, w, r.body)
			}
		}
	}

	off := weakRun(t, e, "nitrate-weak-off", "on_request")
	p := decode[oapi.PredictionResponse](t, e.postJSON(t, e.admin, "/v1/curves/"+off.Curves[0].ID.String()+"/predictions",
		map[string]any{"samples": []map[string]any{{"id": "W-1", "responses": weakSample}}}), http.StatusOK)
	if u := p.Results[0].Uncertainty; u == nil || u.MonteCarlo != nil || u.ReportedInterval != nil {
		t.Errorf("on_request: budget %+v, want no Monte Carlo check", u)
	}
}

// TestMonteCarloNotOnWellDeterminedLine checks that the screen leaves a
// well-determined line alone (Fieller's g far below 0.05, the interval
// symmetric): its prediction and its stored result carry no Monte Carlo
// check, and report y ± U.
func TestMonteCarloNotOnWellDeterminedLine(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.budgetMethod(t, "nitrate-budget", map[string]any{"upper": 9.0, "rule": "guard_band_u"})
	decode[oapi.StandardMaterial](t, e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{
		"code": "CRM-W", "kind": "reference_material", "analyte": "nitrate", "unit": "mg/L", "value": 1000.0,
		"expanded_uncertainty": 20.0, "coverage_factor": 2.0, "expires_at": baseTime.Add(90 * 24 * time.Hour).Format(time.RFC3339)}), http.StatusCreated)
	body := runBody("nitrate-budget", "photometer-7", baseTime, budgetStandards())
	body["standard_materials"] = []string{"CRM-W"}
	body["samples"] = []map[string]any{{"id": "W-1", "analyte": "nitrate", "responses": budgetSample}}
	run := e.run(t, e.admin, body)
	p := decode[oapi.PredictionResponse](t, e.postJSON(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()+"/predictions",
		map[string]any{"samples": []map[string]any{{"id": "W-1", "responses": budgetSample}}}), http.StatusOK)
	rs := decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+run.ID.String()+"/results"), http.StatusOK)
	for where, u := range map[string]*oapi.UncertaintyBudget{"prediction": p.Results[0].Uncertainty, "stored": rs.Results[0].Uncertainty} {
		if u == nil || u.MonteCarlo != nil || u.ReportedInterval != nil || u.Conformity == nil || !strings.Contains(u.Conformity.Statement, " ± ") {
			t.Errorf("%s: budget %+v, want y ± U without a Monte Carlo check", where, u)
		}
	}
}
