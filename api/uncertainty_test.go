package api_test

import (
	"bytes"
	"encoding/csv"
	"fmt"
	"math"
	"net/http"
	"reflect"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/samply/golang-fhir-models/fhir-models/fhir"

	"curvekeeper/api/oapi"
)

// budgetLevels and budgetResponses are an invented straight-line calibration
// with two readings per level, small enough to fit by hand.
var (
	budgetLevels    = []float64{1, 2, 3, 4, 5, 6}
	budgetResponses = [][]float64{{0.21, 0.20}, {0.39, 0.41}, {0.62, 0.60}, {0.80, 0.79}, {1.01, 1.00}, {1.19, 1.22}}
	budgetSample    = []float64{0.55, 0.57}
)

func budgetStandards() []map[string]any {
	out := make([]map[string]any, 0, len(budgetLevels))
	for i, x := range budgetLevels {
		out = append(out, map[string]any{"analyte": "nitrate", "level": fmt.Sprintf("L%d", i+1),
			"concentration": x, "responses": budgetResponses[i]})
	}
	return out
}

// tTable975 is t(0.975; ν) from a printed Student's t table (two-sided
// 95 %), as every statistics textbook lists it (values from memory, three
// decimals).
var tTable975 = map[int]float64{1: 12.706, 2: 4.303, 3: 3.182, 4: 2.776, 5: 2.571, 6: 2.447, 7: 2.365, 8: 2.306,
	9: 2.262, 10: 2.228, 11: 2.201, 12: 2.179, 13: 2.160, 14: 2.145, 15: 2.131, 16: 2.120, 17: 2.110, 18: 2.101,
	19: 2.093, 20: 2.086, 21: 2.080, 22: 2.074, 23: 2.069, 24: 2.064, 25: 2.060, 26: 2.056, 27: 2.052, 28: 2.048, 29: 2.045, 30: 2.042}

// handBudget is the three-term budget computed here by hand from textbook
// formulas, independent of the engine: the unweighted straight line and
// s(x̂0) by Miller & Miller, Statistics and Chemometrics for Analytical
// Chemistry, eq. 5.9.1 (m readings of the unknown, n points); the
// certificate's u = U/k (JCGM 100 §4.3.3); the recovery's relative u(R)/R
// (Eurachem/CITAC QUAM §7.3); u_c by the law of propagation for a product
// (JCGM 100 §5.1.6) and ν_eff by Welch–Satterthwaite (JCGM 100 eq. G.2b).
type handBudget struct {
	y, uCal, uStd, uRec, uc, nuEff, k, U float64
	nu                                   int
}

func computeHandBudget(stdRel, recMean, recU, recDF float64) handBudget {
	var xs, ys []float64
	for i, x := range budgetLevels {
		for _, y := range budgetResponses[i] {
			xs, ys = append(xs, x), append(ys, y)
		}
	}
	n := float64(len(xs))
	var mx, my float64
	for i := range xs {
		mx += xs[i] / n
		my += ys[i] / n
	}
	var sxx, sxy float64
	for i := range xs {
		sxx += (xs[i] - mx) * (xs[i] - mx)
		sxy += (xs[i] - mx) * (ys[i] - my)
	}
	b1 := sxy / sxx
	b0 := my - b1*mx
	var ss float64
	for i := range xs {
		r := ys[i] - b0 - b1*xs[i]
		ss += r * r
	}
	s := math.Sqrt(ss / (n - 2))
	m := float64(len(budgetSample))
	y0 := (budgetSample[0] + budgetSample[1]) / m
	var h handBudget
	h.y = (y0 - b0) / b1
	h.uCal = s / b1 * math.Sqrt(1/m+1/n+(y0-my)*(y0-my)/(b1*b1*sxx))
	h.uStd = h.y * stdRel
	h.uRec = h.y * recU / recMean
	h.uc = math.Sqrt(h.uCal*h.uCal + h.uStd*h.uStd + h.uRec*h.uRec)
	h.nuEff = math.Pow(h.uc, 4) / (math.Pow(h.uCal, 4)/(n-2) + math.Pow(h.uRec, 4)/recDF)
	h.nu = int(math.Floor(h.nuEff))
	h.k = tTable975[h.nu]
	e := math.Floor(math.Log10(h.k*h.uc)) - 1
	h.U = math.Round(h.k*h.uc/math.Pow(10, e)) * math.Pow(10, e)
	return h
}

// budgetMethod defines a method whose nitrate results carry the three-term
// budget (calibration, the run's standards, recovery) and, when limits is
// not nil, a conformity statement.
func (e *env) budgetMethod(t testing.TB, name string, limits map[string]any) {
	t.Helper()
	u := map[string]any{"terms": []string{"calibration", "standards", "recovery"},
		"recovery": map[string]any{"mean": 0.98, "std_uncertainty": 0.02, "df": 10}}
	if limits != nil {
		u["limits"] = limits
	}
	r := e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": name, "model": "linear", "weighting": "none",
		"analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L", "uncertainty": u}}})
	m := decode[oapi.Method](t, r, http.StatusCreated)
	if m.Analytes[0].Uncertainty == nil || len(m.Analytes[0].Uncertainty.Terms) != 3 {
		t.Fatalf("method's analyte uncertainty %+v, want the three terms back", m.Analytes[0].Uncertainty)
	}
}

// TestResultBudgetThreeTerms checks a result's budget end to end: a method
// chooses three terms, a certified material gives the standards' term, and
// the stored result, its change-feed event, the prediction route, the FHIR
// Observation and the HL7 OBX all state the hand-computed budget.
func TestResultBudgetThreeTerms(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.budgetMethod(t, "nitrate-budget", nil)
	// Certificate 1000 ± 20 mg/L (k = 2): u_rel = 10/1000 = 0.01.
	decode[oapi.StandardMaterial](t, e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{
		"code": "CRM-B", "kind": "reference_material", "analyte": "nitrate", "unit": "mg/L", "value": 1000.0,
		"expanded_uncertainty": 20.0, "coverage_factor": 2.0, "lot": "L-1", "supplier": "invented supplier",
		"expires_at": baseTime.Add(90 * 24 * time.Hour).Format(time.RFC3339)}), http.StatusCreated)
	h := computeHandBudget(0.01, 0.98, 0.02, 10)
	if h.k == 0 {
		t.Fatalf("ν_eff = %v: not in the t table of this test", h.nuEff)
	}
	body := runBody("nitrate-budget", "photometer-7", baseTime, budgetStandards())
	body["standard_materials"] = []string{"CRM-B"}
	body["samples"] = []map[string]any{{"id": "W-1", "analyte": "nitrate", "responses": budgetSample}}
	run := e.run(t, e.admin, body)

	check := func(t *testing.T, where string, b *oapi.UncertaintyBudget) {
		t.Helper()
		if b == nil {
			t.Fatalf("%s: no uncertainty budget", where)
		}
		near := func(what string, got, want, tol float64) {
			if math.Abs(got-want) > tol*math.Abs(want) {
				t.Errorf("%s: %s = %.10g, hand computation %.10g", where, what, got, want)
			}
		}
		near("value", b.Value, h.y, 1e-9)
		near("u_c", b.Combined, h.uc, 1e-9)
		if b.EffectiveDf == nil {
			t.Fatalf("%s: ν_eff null, want %v", where, h.nuEff)
		}
		near("ν_eff", *b.EffectiveDf, h.nuEff, 1e-9)
		near("k", b.CoverageFactor, h.k, 5e-4) // the table has three decimals
		near("U", b.Expanded, h.U, 1e-12)
		if len(b.Terms) != 3 {
			t.Fatalf("%s: %d terms, want 3", where, len(b.Terms))
		}
		wantU := []float64{h.uCal, h.uStd, h.uRec}
		var shares float64
		for i, tm := range b.Terms {
			near("contribution of "+tm.Name, math.Abs(tm.Contribution), wantU[i], 1e-9)
			near("share of "+tm.Name, tm.Share, wantU[i]*wantU[i]/(h.uc*h.uc), 1e-9)
			shares += tm.Share
		}
		if math.Abs(shares-1) > 1e-12 {
			t.Errorf("%s: shares add to %v, want 1", where, shares)
		}
		if b.Terms[0].Df == nil || *b.Terms[0].Df != 10 || b.Terms[1].Df != nil || b.Terms[2].Df == nil || *b.Terms[2].Df != 10 {
			t.Errorf("%s: term degrees of freedom %v %v %v, want 10, null (∞), 10", where, b.Terms[0].Df, b.Terms[1].Df, b.Terms[2].Df)
		}
		if b.Conformity != nil {
			t.Errorf("%s: a conformity statement without limits: %+v", where, b.Conformity)
		}
	}

	path := "/v1/runs/" + run.ID.String() + "/results"
	rs := decode[oapi.RunResults](t, e.get(t, e.admin, path), http.StatusOK)
	if len(rs.Results) != 1 {
		t.Fatalf("%d results, want 1", len(rs.Results))
	}
	check(t, "stored result", rs.Results[0].Uncertainty)
	stored := rs.Results[0].Uncertainty

	feed := decode[oapi.ResultFeed](t, e.get(t, e.admin, "/v1/results"), http.StatusOK)
	if len(feed.Events) != 1 {
		t.Fatalf("%d events, want 1", len(feed.Events))
	}
	check(t, "change feed", feed.Events[0].Uncertainty)

	pred := decode[oapi.PredictionResponse](t, e.postJSON(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()+"/predictions",
		map[string]any{"samples": []map[string]any{{"id": "W-1", "responses": budgetSample}}}), http.StatusOK)
	check(t, "prediction", pred.Results[0].Uncertainty)

	// FHIR: u_c in the iso21090-uncertainty extension, type T (a k from
	// t(ν_eff)), the value rounded to the place of U, U in a note.
	r := e.do(t, call{method: http.MethodGet, path: path, token: e.admin, header: map[string]string{"Accept": "application/fhir+json"}})
	bundle, err := fhir.UnmarshalBundle(r.body)
	if err != nil || len(bundle.Entry) != 1 {
		t.Fatalf("FHIR bundle: %v, %d entries", err, len(bundle.Entry))
	}
	o, err := fhir.UnmarshalObservation(bundle.Entry[0].Resource)
	if err != nil {
		t.Fatal(err)
	}
	q := o.ValueQuantity
	if q == nil {
		c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()), http.StatusOK)
		t.Fatalf("FHIR observation without a value (status %v); curve verdict %s, checks %+v", o.Status, c.Verdict, c.Checks)
	}
	if string(*q.Value) != stored.ValueText || len(q.Extension) != 2 || q.Extension[0].Url != "http://hl7.org/fhir/StructureDefinition/iso21090-uncertainty" ||
		*q.Extension[1].ValueCode != "T" {
		t.Fatalf("FHIR quantity %s with extensions %+v, want value %s with u_c, type T", *q.Value, q.Extension, stored.ValueText)
	}
	if u, _ := strconv.ParseFloat(string(*q.Extension[0].ValueDecimal), 64); math.Abs(u-h.uc) > 1e-5*h.uc {
		t.Errorf("FHIR uncertainty %v, want u_c %v", u, h.uc)
	}
	notes := ""
	for _, n := range o.Note {
		notes += n.Text + "\n"
	}
	if !strings.Contains(notes, "Expanded uncertainty U = "+stored.ExpandedText+" mg/L") {
		t.Errorf("FHIR notes do not state U = %s:\n%s", stored.ExpandedText, notes)
	}

	// HL7 v2: OBX-5 the rounded value, an NTE with U.
	r = e.do(t, call{method: http.MethodGet, path: path, token: e.admin, header: map[string]string{"Accept": "x-application/hl7-v2+er7"}})
	msg := string(r.body)
	var obx []string
	for _, seg := range strings.Split(msg, "\r") {
		if strings.HasPrefix(seg, "OBX|") {
			obx = strings.Split(seg, "|")
		}
	}
	if len(obx) < 6 || obx[5] != stored.ValueText {
		t.Errorf("OBX %v, want OBX-5 = %s", obx, stored.ValueText)
	}
	if !strings.Contains(msg, "NTE|") || !strings.Contains(msg, "Expanded uncertainty U = "+stored.ExpandedText) {
		t.Errorf("HL7 message has no NTE with U = %s:\n%s", stored.ExpandedText, strings.ReplaceAll(msg, "\r", "\n"))
	}

	// CSV: the rounded value, U, k and level in their columns.
	r = e.do(t, call{method: http.MethodGet, path: path, token: e.admin, header: map[string]string{"Accept": "text/csv"}})
	rows, err := csv.NewReader(bytes.NewReader(r.body)).ReadAll()
	if err != nil || len(rows) != 2 {
		t.Fatalf("CSV: %v, %d rows", err, len(rows))
	}
	col := map[string]string{}
	for i, h := range rows[0] {
		col[h] = rows[1][i]
	}
	if col["value"] != stored.ValueText || col["expanded_uncertainty"] != stored.ExpandedText ||
		col["coverage_factor"] != strconv.FormatFloat(h.k, 'f', 2, 64) || col["coverage_level"] != "0.95" {
		t.Errorf("CSV row %v, want value %s, U %s, k %.2f, level 0.95", col, stored.ValueText, stored.ExpandedText, h.k)
	}

	// Monte Carlo on request: seeded, at least 10⁵ draws, and on this
	// well-determined line its 95 % interval agrees with y ± U within a
	// tenth of U (JCGM 101 §8.2 compares at the numerical tolerance; a
	// tenth of U is this test's looser bound).
	mc := decode[oapi.PredictionResponse](t, e.postJSON(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()+"/predictions",
		map[string]any{"samples": []map[string]any{{"id": "W-1", "responses": budgetSample}}, "monte_carlo": map[string]any{"seed": 7}}), http.StatusOK)
	m := mc.Results[0].Uncertainty.MonteCarlo
	if m == nil || m.Draws < 100000 || m.Seed != 7 {
		t.Fatalf("Monte Carlo %+v, want ≥ 10⁵ draws with seed 7", m)
	}
	if math.Abs(m.Low-(h.y-h.k*h.uc)) > 0.1*h.U || math.Abs(m.High-(h.y+h.k*h.uc)) > 0.1*h.U {
		t.Errorf("Monte Carlo interval [%v, %v], GUM [%v, %v]", m.Low, m.High, h.y-h.k*h.uc, h.y+h.k*h.uc)
	}
	again := decode[oapi.PredictionResponse](t, e.postJSON(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()+"/predictions",
		map[string]any{"samples": []map[string]any{{"id": "W-1", "responses": budgetSample}}, "monte_carlo": map[string]any{"seed": 7}}), http.StatusOK)
	if !reflect.DeepEqual(again.Results[0].Uncertainty.MonteCarlo, m) {
		t.Errorf("the same seed gave %+v, then %+v", *m, *again.Results[0].Uncertainty.MonteCarlo)
	}

	// A sample posted after its run gets the same budget for the same
	// readings (the run's materials still give the standards' term).
	late := decode[oapi.RunResults](t, e.postJSON(t, e.admin, "/v1/runs/"+run.ID.String()+"/samples",
		map[string]any{"samples": []map[string]any{{"id": "W-2", "analyte": "nitrate", "responses": budgetSample}}}), http.StatusCreated)
	check(t, "late sample", late.Results[0].Uncertainty)

	// A revision by exclusion quantifies the run's samples again, each with
	// its budget: the calibration term now has ν = 11 − 2 = 9.
	rev := decode[oapi.Curve](t, e.postJSON(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()+"/exclusions", map[string]any{
		"reason": "air bubble in the L6 injection", "points": []map[string]any{{"level": "L6", "replicate": 2}}}), http.StatusCreated)
	all := decode[oapi.RunResults](t, e.get(t, e.admin, path), http.StatusOK)
	revised := 0
	for _, r := range all.Results {
		if r.CurveID != rev.ID {
			continue
		}
		revised++
		if b := r.Uncertainty; b == nil || len(b.Terms) != 3 || b.Terms[0].Df == nil || *b.Terms[0].Df != 9 {
			t.Errorf("result %d against the revision: budget %+v, want three terms with ν_cal = 9", r.ID, b)
		}
	}
	if revised != 2 {
		t.Errorf("%d results against the revision, want 2", revised)
	}
}

// TestResultConformity states the conformity of one result against an
// upper limit placed at result ± 0.5·U and ± 1.01·U, under simple acceptance
// and under the guard band w = U (ILAC G8:09/2019 §4.2.1 and §4.2.2, as
// calib.Decide implements them): simple acceptance passes every result at
// or below the limit; the guard band passes only one at least U below it,
// and fails only one more than U above it.
func TestResultConformity(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	h := computeHandBudget(0, 0.98, 0.02, 10) // no standards' material named: the term is left out
	// Without the standards' term the hand budget has two terms.
	cases := []struct {
		offset        float64 // limit = y + offset·U
		simple, guard string
	}{
		{1.01, "pass", "pass"},
		{0.5, "pass", "conditional pass"},
		{-0.5, "fail", "conditional fail"},
		{-1.01, "fail", "fail"},
	}
	// The stored U is rounded to two figures; the limits are placed from
	// the engine's own y and U, read with a prediction.
	e.budgetMethod(t, "conf-base", nil)
	run := e.run(t, e.admin, runBody("conf-base", "photometer-7", baseTime, budgetStandards()))
	p := decode[oapi.PredictionResponse](t, e.postJSON(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()+"/predictions",
		map[string]any{"samples": []map[string]any{{"id": "W-1", "responses": budgetSample}}}), http.StatusOK)
	b := p.Results[0].Uncertainty
	if math.Abs(b.Value-h.y) > 1e-9*h.y || len(b.Terms) != 2 {
		t.Fatalf("value %v with %d terms, want %v with two (the standards' term left out)", b.Value, len(b.Terms), h.y)
	}
	for i, c := range cases {
		for _, rule := range []string{"simple_acceptance", "guard_band_u"} {
			name := fmt.Sprintf("conf-%d-%s", i, rule)
			limit := b.Value + c.offset*b.Expanded
			withLimit := name
			e.budgetMethod(t, withLimit, map[string]any{"upper": limit, "rule": rule})
			body := runBody(withLimit, "photometer-7", baseTime, budgetStandards())
			body["samples"] = []map[string]any{{"id": "W-1", "analyte": "nitrate", "responses": budgetSample}}
			run = e.run(t, e.admin, body)
			rs := decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+run.ID.String()+"/results"), http.StatusOK)
			conf := rs.Results[0].Uncertainty.Conformity
			want := c.simple
			if rule == "guard_band_u" {
				want = c.guard
			}
			if conf == nil || string(conf.Outcome) != want || string(conf.Rule) != rule || conf.Upper == nil || *conf.Upper != limit {
				t.Errorf("limit y%+.2f·U under %s: conformity %+v, want %s", c.offset, rule, conf, want)
				continue
			}
			words := map[string]string{"simple_acceptance": "under simple acceptance", "guard_band_u": "under guard band w = U"}[rule]
			if conf.Accepted != (want == "pass") || !strings.Contains(conf.Statement, words) {
				t.Errorf("limit y%+.2f·U under %s: accepted %v, statement %q", c.offset, rule, conf.Accepted, conf.Statement)
			}
			if rule == "guard_band_u" && (conf.AcceptHigh == nil || math.Abs(*conf.AcceptHigh-(limit-b.Expanded)) > 1e-12) {
				t.Errorf("guard band acceptance limit %v, want the limit − U = %v", conf.AcceptHigh, limit-b.Expanded)
			}
			if conf.Risk == "" {
				t.Errorf("no risk stated")
			}
			// FHIR: the conformity as an interpretation (v3
			// ObservationInterpretation: N within, IND too close to the
			// limit to state, HX above the upper threshold).
			r := e.do(t, call{method: http.MethodGet, path: "/v1/runs/" + run.ID.String() + "/results", token: e.admin,
				header: map[string]string{"Accept": "application/fhir+json"}})
			bundle, err := fhir.UnmarshalBundle(r.body)
			if err != nil || len(bundle.Entry) != 1 {
				t.Fatalf("FHIR bundle: %v", err)
			}
			o, err := fhir.UnmarshalObservation(bundle.Entry[0].Resource)
			if err != nil {
				t.Fatal(err)
			}
			wantCode := map[string]string{"pass": "N", "conditional pass": "IND", "conditional fail": "IND", "fail": "HX"}[want]
			var codes []string
			for _, in := range o.Interpretation {
				codes = append(codes, *in.Coding[0].Code)
			}
			if len(codes) != 1 || codes[0] != wantCode {
				t.Errorf("limit y%+.2f·U under %s: FHIR interpretation %v, want [%s]", c.offset, rule, codes, wantCode)
			}
		}
	}
}

// TestResultBudgetFourPL: a non-linear (4PL) curve's budget takes its
// calibration term from the engine's s(x̂0) of the curve (the delta-method
// standard error the prediction reports), combines it with a recovery term
// by the law of propagation for a product (JCGM 100 §5.1.6; hand
// computation here) and uses the method's fixed k = 2; a response above the
// upper asymptote has no concentration and no budget.
func TestResultBudgetFourPL(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": "elisa-4pl-budget", "model": "4pl",
		"weighting": "1/y^2", "analytes": []map[string]any{{"name": "cytokine-x", "unit": "ng/mL", "uncertainty": map[string]any{
			"terms": []string{"calibration", "recovery"}, "coverage": "k2",
			"recovery": map[string]any{"mean": 0.95, "std_uncertainty": 0.03}}}}}), http.StatusCreated)
	xs := []float64{0.5, 1, 2.5, 5, 10, 25, 50, 100}
	ys := [][]float64{{0.081, 0.077}, {0.118, 0.124}, {0.236, 0.229}, {0.432, 0.447},
		{0.806, 0.781}, {1.542, 1.571}, {2.118, 2.071}, {2.452, 2.497}}
	var stds []map[string]any
	for i, x := range xs {
		stds = append(stds, map[string]any{"analyte": "cytokine-x", "level": fmt.Sprintf("C%d", i+1), "concentration": x, "responses": ys[i]})
	}
	run := e.run(t, e.admin, runBody("elisa-4pl-budget", "plate-reader-2", baseTime, stds))
	got := decode[oapi.PredictionResponse](t, e.postJSON(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()+"/predictions",
		map[string]any{"samples": []map[string]any{{"id": "P1-A3", "responses": []float64{0.61, 0.63}}, {"id": "P1-H1", "responses": []float64{4}}}}),
		http.StatusOK)
	res := got.Results[0]
	b := res.Uncertainty
	if res.Concentration == nil || res.StandardError == nil || b == nil || len(b.Terms) != 2 {
		t.Fatalf("result %+v with budget %+v", res, b)
	}
	y, se := *res.Concentration, *res.StandardError
	uRec := y * 0.03 / 0.95
	uc := math.Sqrt(se*se + uRec*uRec)
	e10 := math.Pow(10, math.Floor(math.Log10(2*uc))-1)
	if math.Abs(b.Terms[0].Contribution-se) > 1e-12*se || math.Abs(b.Combined-uc) > 1e-12*uc ||
		b.CoverageFactor != 2 || b.Coverage != oapi.CoverageK2 || math.Abs(b.Expanded-math.Round(2*uc/e10)*e10) > 1e-15 {
		t.Errorf("budget u_cal %v (s(x̂0) %v), u_c %v (hand %v), k %v (%s), U %v (hand %v)",
			b.Terms[0].Contribution, se, b.Combined, uc, b.CoverageFactor, b.Coverage, b.Expanded, math.Round(2*uc/e10)*e10)
	}
	if h := got.Results[1]; h.Concentration != nil || h.Uncertainty != nil {
		t.Errorf("above the asymptote: %+v with budget %+v; want neither", h, h.Uncertainty)
	}
}
