package api_test

import (
	"math"
	"net/http"
	"strings"
	"testing"
	"time"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
)

// topDownSpec is a nitrate spec whose U is the larger of the calibration
// term (k = 2) and the top-down estimate from the QC history.
func topDownSpec(extra map[string]any) map[string]any {
	u := map[string]any{"terms": []string{"calibration"}, "coverage": "k2", "approach": "larger", "top_down_source": "history"}
	for k, v := range extra {
		u[k] = v
	}
	return u
}

// topDownEnv is a history for the method td-uv: curves by an instrument
// token (so that the admin may review them), verifications at chosen
// recoveries, and reference materials.
type topDownEnv struct {
	*env
	poster string
	n      int
}

func (e *topDownEnv) defineMethod(t *testing.T, name string, spec map[string]any) {
	t.Helper()
	r := e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": name, "model": "linear", "weighting": "none",
		"analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L", "uncertainty": spec}, {"name": "nitrite", "unit": "mg/L"}}})
	decode[oapi.Method](t, r, http.StatusCreated)
}

// curve posts a run of method acquired at at (budgetStandards for nitrate
// and nitrite) and returns the nitrate and nitrite curves' ids.
func (e *topDownEnv) curve(t *testing.T, method string, at time.Time) (nitrate, nitrite string) {
	t.Helper()
	e.n++
	stds := budgetStandards()
	for _, s := range budgetStandards() {
		s["analyte"] = "nitrite"
		stds = append(stds, s)
	}
	rc := e.run(t, e.poster, runBody(method, "photometer-7", at, stds))
	for _, c := range rc.Curves {
		if c.Analyte == "nitrate" {
			nitrate = c.ID.String()
		} else {
			nitrite = c.ID.String()
		}
	}
	return nitrate, nitrite
}

// verify records a verification of nominal conc against curve whose found
// concentration is found: the response is b0 + b1·found on the curve's
// own fit, so found/nominal is the recovery chosen.
func (e *topDownEnv) verify(t *testing.T, curve string, kind string, conc, found float64, at time.Time, material string) reply {
	t.Helper()
	c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+curve), http.StatusOK)
	b := map[string]any{"kind": kind, "level": "QC", "concentration": conc,
		"responses": []float64{c.Coefficients[0] + c.Coefficients[1]*found}, "acquired_at": at.Format(time.RFC3339)}
	if material != "" {
		b["material"] = material
	}
	return e.postJSON(t, e.admin, "/v1/curves/"+curve+"/verifications", b)
}

func (e *topDownEnv) material(t *testing.T, code, analyte string, value, expanded float64, expires time.Time, kind string) {
	t.Helper()
	r := e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{"code": code, "kind": kind, "analyte": analyte,
		"unit": "mg/L", "value": value, "expanded_uncertainty": expanded, "coverage_factor": 2.0, "expires_at": expires.Format(time.RFC3339)})
	if r.status != http.StatusCreated {
		t.Fatalf("material %s: %s", code, r)
	}
}

// TestTopDownFromHistory: the route's estimate from the stored QC history,
// its filters, the material rules of a verification, and a prediction and
// a stored result under approach larger with the history as source.
func TestTopDownFromHistory(t *testing.T) {
	t.Parallel()
	e := &topDownEnv{env: newEnv(t)}
	_, e.poster = e.token(t, "td-instrument", "runs:write")
	e.defineMethod(t, "td-uv", topDownSpec(nil))
	e.defineMethod(t, "td-other", topDownSpec(nil))
	day := func(m time.Month, d int) time.Time { return time.Date(2031, m, d, 10, 0, 0, 0, time.UTC) }
	// testNow is 2032-01-05: the default period is [2031-01-05, 2032-01-05).
	e.material(t, "CRM-N1", "nitrate", 3.0, 0.06, day(12, 31).AddDate(1, 0, 0), "reference_material") // u(Cref)/Cref = 0.03/3 = 0.01
	e.material(t, "CRM-OLD", "nitrate", 3.0, 0.06, day(3, 1), "reference_material")
	e.material(t, "CRM-NO2", "nitrite", 3.0, 0.06, day(12, 31), "reference_material")
	e.material(t, "STOCK-N", "nitrate", 3.0, 0.06, day(12, 31), "stock_solution")

	a, aNitrite := e.curve(t, "td-uv", day(6, 1))
	b, _ := e.curve(t, "td-uv", day(7, 1))
	rejected, _ := e.curve(t, "td-uv", day(6, 15))
	superseded, _ := e.curve(t, "td-uv", day(6, 20))
	early, _ := e.curve(t, "td-uv", time.Date(2030, 11, 1, 10, 0, 0, 0, time.UTC))
	other, _ := e.curve(t, "td-other", day(6, 1))

	// The counted set (hand computation, Nordtest TR 537 / ISO 11352
	// formulas as in calib/topdown.go, invented data):
	//   recoveries 0.98, 1.02, 1.00, 0.97, 1.03 and the two CRM results
	//   1.02, 0.98: n = 7, mean 7.00/7 = 1.00,
	//   Σ(r − 1)² = 0.0004+0.0004+0+0.0009+0.0009+0.0004+0.0004 = 0.0034,
	//   u(Rw) = √(0.0034/6) = √0.000566667 = 0.02380476
	//   CRM-N1 (3.0 mg/L, U 0.06, k 2): found 3.06 and 2.94, b = ±0.02,
	//   RMS bias = 0.02, u(Cref) = 0.03/3 = 0.01,
	//   u(bias) = √(0.0004 + 0.0001) = 0.02236068
	//   u_c = √(0.000566667 + 0.0005) = √0.001066667 = 0.03265986, U = 0.06531973
	for _, v := range []struct {
		curve, kind string
		found       float64
		at          time.Time
		material    string
	}{
		{a, "initial", 2.94, day(6, 2), ""}, {a, "continuing", 3.06, day(6, 3), ""}, {a, "continuing", 3.00, day(6, 4), ""},
		{b, "initial", 2.91, day(7, 2), ""}, {b, "continuing", 3.09, day(7, 3), ""},
		{a, "continuing", 3.06, day(6, 5), "CRM-N1"}, {b, "continuing", 2.94, day(7, 4), "CRM-N1"},
		// Not counted: a curve rejected later, a curve superseded later,
		// before the period, another analyte, another method.
		{rejected, "continuing", 1.5, day(6, 16), ""}, {superseded, "continuing", 4.5, day(6, 21), "CRM-N1"},
		{early, "continuing", 1.5, time.Date(2030, 12, 1, 10, 0, 0, 0, time.UTC), ""},
		{aNitrite, "continuing", 1.5, day(6, 6), ""}, {other, "continuing", 1.5, day(6, 6), "CRM-N1"},
	} {
		if r := e.verify(t, v.curve, v.kind, 3.0, v.found, v.at, v.material); r.status != http.StatusCreated {
			t.Fatalf("verification: %s", r)
		}
	}
	if r := e.postJSON(t, e.admin, "/v1/curves/"+rejected+"/review", map[string]any{"decision": "reject", "reason": "drifting lamp"}); r.status != http.StatusOK {
		t.Fatalf("reject: %s", r)
	}
	if r := e.postJSON(t, e.admin, "/v1/curves/"+superseded+"/exclusions", map[string]any{"reason": "bubble in the cell",
		"points": []map[string]any{{"level": "L2", "replicate": 1}}}); r.status != http.StatusCreated {
		t.Fatalf("exclusion: %s", r)
	}

	t.Run("estimate", func(t *testing.T) {
		got := decode[oapi.TopDownReport](t, e.get(t, e.admin, "/v1/methods/td-uv/top-down?analyte=nitrate"), http.StatusOK)
		if got.RecoveriesCount != 7 || got.ReferenceCount != 2 || len(got.Recoveries) != 7 || len(got.ReferenceResults) != 2 {
			t.Fatalf("counts %d recoveries (%d listed), %d reference results (%d listed); want 7 and 2",
				got.RecoveriesCount, len(got.Recoveries), got.ReferenceCount, len(got.ReferenceResults))
		}
		if !got.From.Equal(testNow.Add(-365*24*time.Hour)) || !got.To.Equal(testNow) {
			t.Errorf("period [%s, %s), want the 365 days before the clock's now %s", got.From, got.To, testNow)
		}
		for _, c := range []struct {
			what      string
			got, want float64
		}{
			{"u(Rw)", got.URw, 0.02380476}, {"RMS bias", got.RmsBias, 0.02}, {"u(Cref)", got.UCref, 0.01},
			{"u(bias)", got.UBias, 0.02236068}, {"u_c", got.Combined, 0.03265986}, {"U", got.Expanded, 0.06531973},
		} {
			if math.Abs(c.got-c.want) > 2e-8 {
				t.Errorf("%s = %.9f, want %.8f (hand computation in the comment)", c.what, c.got, c.want)
			}
		}
		for _, p := range got.ReferenceResults {
			if p.Material == nil || *p.Material != "CRM-N1" || p.ReferenceURel == nil || math.Abs(*p.ReferenceURel-0.01) > 1e-15 {
				t.Errorf("reference result %+v, want CRM-N1 with u_rel 0.01", p)
			}
		}
		if len(got.Notes) != 2 {
			t.Errorf("notes %q, want the two common-practice cautions (7 < 20 recoveries, 2 < 3 CRM results)", got.Notes)
		}

		// The same numbers from calib.ComputeTopDown on the verifications
		// read back through the curves' own verification lists.
		var in calib.TopDownInput
		for _, c := range []string{a, b} {
			vs := decode[oapi.VerificationList](t, e.get(t, e.admin, "/v1/curves/"+c+"/verifications"), http.StatusOK)
			for _, v := range vs.Verifications {
				in.QCRecoveries = append(in.QCRecoveries, *v.RecoveryPct/100)
				if v.Material != nil {
					m := decode[oapi.StandardMaterial](t, e.get(t, e.admin, "/v1/standard-materials/"+*v.Material), http.StatusOK)
					in.CRM = append(in.CRM, calib.CRMResult{Measured: *v.Found, Reference: m.Value, RefStdUncertainty: *m.ExpandedUncertainty / *m.CoverageFactor})
				}
			}
		}
		want, err := calib.ComputeTopDown(in)
		if err != nil {
			t.Fatal(err)
		}
		for _, c := range []struct {
			what      string
			got, want float64
		}{
			{"u(Rw)", got.URw, want.URw}, {"RMS bias", got.RmsBias, want.RMSBias}, {"u(Cref)", got.UCref, want.URef},
			{"u(bias)", got.UBias, want.UBias}, {"u_c", got.Combined, want.Combined}, {"U", got.Expanded, want.Expanded},
		} {
			if math.Abs(c.got-c.want) > 1e-12 {
				t.Errorf("%s: route %.15g, ComputeTopDown on the read-back verifications %.15g", c.what, c.got, c.want)
			}
		}

		// A period from 2030-11-01 takes the early curve's verification too.
		wide := decode[oapi.TopDownReport](t, e.get(t, e.admin, "/v1/methods/td-uv/top-down?analyte=nitrate&from=2030-11-01T00:00:00Z"), http.StatusOK)
		if wide.RecoveriesCount != 8 {
			t.Errorf("from 2030-11-01: %d recoveries, want 8", wide.RecoveriesCount)
		}
	})

	t.Run("refusals", func(t *testing.T) {
		for name, tt := range map[string]struct {
			path    string
			status  int
			pointer string
		}{
			"one recovery":     {"/v1/methods/td-uv/top-down?analyte=nitrate&from=2031-06-01T00:00:00Z&to=2031-06-03T00:00:00Z", 422, "query:from"},
			"no CRM result":    {"/v1/methods/td-uv/top-down?analyte=nitrate&from=2031-06-01T00:00:00Z&to=2031-06-05T00:00:00Z", 422, "query:from"},
			"nitrite: no CRM":  {"/v1/methods/td-uv/top-down?analyte=nitrite", 422, "query:from"},
			"unknown analyte":  {"/v1/methods/td-uv/top-down?analyte=sulfate", 400, "query:analyte"},
			"empty period":     {"/v1/methods/td-uv/top-down?analyte=nitrate&from=2031-06-01T00:00:00Z&to=2031-06-01T00:00:00Z", 400, "query:from"},
			"unknown method":   {"/v1/methods/td-none/top-down?analyte=nitrate", 404, ""},
			"analyte required": {"/v1/methods/td-uv/top-down", 400, ""},
		} {
			t.Run(name, func(t *testing.T) { wantProblem(t, e.get(t, e.admin, tt.path), tt.status, tt.pointer) })
		}
		for name, tt := range map[string]struct {
			material, pointer string
			conc              float64
		}{
			"expired":            {"CRM-OLD", "/material", 3.0},
			"wrong analyte":      {"CRM-NO2", "/material", 3.0},
			"not a CRM":          {"STOCK-N", "/material", 3.0},
			"unknown":            {"CRM-NONE", "/material", 3.0},
			"not the cert value": {"CRM-N1", "/concentration", 2.5},
		} {
			t.Run(name, func(t *testing.T) {
				wantProblem(t, e.verify(t, a, "continuing", tt.conc, 3.0, day(6, 7), tt.material), http.StatusUnprocessableEntity, tt.pointer)
			})
		}
	})

	t.Run("prediction picks the larger U", func(t *testing.T) {
		pr := func(curve string) oapi.UncertaintyBudget {
			t.Helper()
			r := e.postJSON(t, e.admin, "/v1/curves/"+curve+"/predictions", map[string]any{"samples": []map[string]any{{"id": "W-1", "responses": budgetSample}}})
			got := decode[oapi.PredictionResponse](t, r, http.StatusOK)
			if got.Results[0].Uncertainty == nil {
				t.Fatalf("no budget: %s", r)
			}
			return *got.Results[0].Uncertainty
		}
		u := pr(b)
		td := u.TopDown
		if td == nil || td.Source == nil || *td.Source != oapi.TopDownSourceHistory || td.History == nil {
			t.Fatalf("top_down %+v, want the history as source with its provenance", td)
		}
		if td.History.Recoveries != 7 || td.History.ReferenceResults != 2 || !td.History.To.Equal(testNow) {
			t.Errorf("provenance %+v, want 7 recoveries and 2 reference results to %s", *td.History, testNow)
		}
		if math.Abs(td.Relative-0.03265986) > 2e-8 {
			t.Errorf("relative u %.9f, want the history's u_c 0.03265986", td.Relative)
		}
		// Bottom-up U: the calibration term alone, k = 2 (its contribution is u_c).
		bottomUp := 2 * u.Terms[0].Contribution
		if u.Approach != oapi.ApproachLarger || !(td.Expanded > bottomUp) {
			t.Fatalf("approach %s, top-down U %g, bottom-up U %g: the invented history should give the larger U", u.Approach, td.Expanded, bottomUp)
		}
		if u.Expanded != td.Expanded || u.ExpandedText != td.ExpandedText {
			t.Errorf("U %g (%s), want the larger, top-down %g (%s)", u.Expanded, u.ExpandedText, td.Expanded, td.ExpandedText)
		}
		if want := 2 * 0.03265986 * u.Value; math.Abs(td.Expanded-want) > 0.05*want {
			t.Errorf("top-down U %g, want 2·u_c·y = %g to two significant figures", td.Expanded, want)
		}

		// A new verification drops the cached estimate: the next prediction counts it.
		if r := e.verify(t, b, "continuing", 3.0, 3.0, day(7, 5), ""); r.status != http.StatusCreated {
			t.Fatalf("verification: %s", r)
		}
		if h := pr(b).TopDown.History; h == nil || h.Recoveries != 8 {
			t.Errorf("after one more verification: provenance %+v, want 8 recoveries", h)
		}

		// A sample added to the run now stores the same choice.
		c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+b), http.StatusOK)
		r := e.postJSON(t, e.admin, "/v1/runs/"+c.RunID.String()+"/samples", map[string]any{"samples": []map[string]any{{"id": "TD-1",
			"analyte": "nitrate", "responses": budgetSample, "acquired_at": day(7, 6).Format(time.RFC3339)}}})
		stored := decode[oapi.SampleResults](t, r, http.StatusCreated).Results[0].Uncertainty
		if stored == nil || stored.TopDown == nil || stored.TopDown.History == nil || stored.TopDown.History.Recoveries != 8 || stored.Approach != oapi.ApproachLarger {
			t.Errorf("stored budget %+v, want approach larger from the history of 8 recoveries", stored)
		}
	})

	t.Run("too little history falls back", func(t *testing.T) {
		e.defineMethod(t, "td-empty", topDownSpec(nil))
		e.defineMethod(t, "td-stated", topDownSpec(map[string]any{"top_down_relative": 0.05}))
		for _, tt := range []struct {
			method, approach, note string
			source                 *oapi.TopDownSource
		}{
			{"td-empty", "bottom_up", "U is the bottom-up budget", nil},
			{"td-stated", "larger", "stated top_down_relative is used", ptrTo(oapi.TopDownSourceStated)},
		} {
			curve, _ := e.curve(t, tt.method, day(8, 1))
			r := e.postJSON(t, e.admin, "/v1/curves/"+curve+"/predictions", map[string]any{"samples": []map[string]any{{"id": "W-2", "responses": budgetSample}}})
			u := decode[oapi.PredictionResponse](t, r, http.StatusOK).Results[0].Uncertainty
			if u == nil || string(u.Approach) != tt.approach || !strings.Contains(strings.Join(u.Notes, " "), tt.note) {
				t.Fatalf("%s: budget %+v, want approach %s and a note %q", tt.method, u, tt.approach, tt.note)
			}
			if (u.TopDown == nil) != (tt.source == nil) || (u.TopDown != nil && *u.TopDown.Source != *tt.source) {
				t.Errorf("%s: top_down %+v, want source %v", tt.method, u.TopDown, tt.source)
			}
		}
	})
}

func ptrTo[T any](v T) *T { return &v }
