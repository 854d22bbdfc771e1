package api_test

import (
	"net/http"
	"testing"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
)

func TestMethodsRevisions(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	body := map[string]any{"name": "nitrate-uv", "model": "linear", "weighting": "1/x",
		"analytes":   []map[string]any{{"name": "nitrate", "unit": "mg/L"}},
		"acceptance": map[string]any{"min_r_squared": 0.995}}
	r := e.postJSON(t, e.admin, "/v1/methods", body)
	m1 := decode[oapi.Method](t, r, http.StatusCreated)
	if loc := r.header.Get("Location"); loc != "/v1/methods/nitrate-uv" {
		t.Errorf("Location %q, want /v1/methods/nitrate-uv", loc)
	}
	if m1.Revision != 1 || m1.Confidence != 0.95 || m1.Weighting != "1/x" {
		t.Errorf("method %+v, want revision 1, confidence 0.95 (the default), 1/x", m1)
	}
	// Thresholds left out take the engine's defaults; the one given is kept.
	def := calib.DefaultPolicy()
	a := m1.Acceptance
	if a.MinRSquared != 0.995 {
		t.Errorf("min_r_squared %v, want the posted 0.995", a.MinRSquared)
	}
	if a.MinLevels != def.MinLevels || a.BackCalcTolerancePct != def.BackCalcTolerancePct ||
		a.MandelAlpha != def.MandelAlpha || a.OutlierCooksD != def.OutlierCooksD || len(a.Mandatory) != len(def.Mandatory) {
		t.Errorf("acceptance %+v, want the engine's defaults %+v filled in", a, def)
	}

	// Posting the same content again creates nothing.
	before := e.counts(t)
	same := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusOK)
	if same.Revision != 1 {
		t.Errorf("identical repost answered revision %d, want 1", same.Revision)
	}
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("identical repost wrote rows: %s", d)
	}

	// A change makes revision 2; revision 1 stays readable.
	body["weighting"] = "1/x^2"
	m2 := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusCreated)
	if m2.Revision != 2 || m2.Weighting != "1/x^2" {
		t.Errorf("changed repost %+v, want revision 2 with 1/x^2", m2)
	}
	latest := decode[oapi.Method](t, e.get(t, e.admin, "/v1/methods/nitrate-uv"), http.StatusOK)
	if latest.Revision != 2 {
		t.Errorf("latest revision %d, want 2", latest.Revision)
	}
	old := decode[oapi.Method](t, e.get(t, e.admin, "/v1/methods/nitrate-uv?revision=1"), http.StatusOK)
	if old.Revision != 1 || old.Weighting != "1/x" {
		t.Errorf("revision 1 reads %+v", old)
	}
	wantProblem(t, e.get(t, e.admin, "/v1/methods/nitrate-uv?revision=3"), http.StatusNotFound, "")
	wantProblem(t, e.get(t, e.admin, "/v1/methods/sulfate-ic"), http.StatusNotFound, "")

	e.method(t, "phosphate-mb", "phosphate")
	list := decode[oapi.MethodList](t, e.get(t, e.admin, "/v1/methods"), http.StatusOK)
	if len(list.Methods) != 2 || list.Methods[0].Name != "nitrate-uv" || list.Methods[0].Revision != 2 || list.Methods[1].Name != "phosphate-mb" {
		t.Errorf("list %+v, want nitrate-uv rev 2 and phosphate-mb, by name", list.Methods)
	}

	// A run fitted after the change records revision 2.
	run := e.run(t, e.admin, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)))
	curve := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()), http.StatusOK)
	if curve.MethodRevision != 2 || curve.WeightingRequested != "1/x^2" {
		t.Errorf("curve fitted with revision %d (%s), want 2 (1/x^2)", curve.MethodRevision, curve.WeightingRequested)
	}
}

// TestMethodDescriptionKept: the administrator's description is stored, read
// back, and changing it makes a new revision.
func TestMethodDescriptionKept(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	body := map[string]any{"name": "sulfate-ic", "model": "linear", "weighting": "none",
		"description": "Sulfate by ion chromatography (invented method)",
		"analytes":    []map[string]any{{"name": "sulfate", "unit": "mg/L"}}}
	m1 := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusCreated)
	if m1.Description != body["description"] {
		t.Errorf("description %q, want %q", m1.Description, body["description"])
	}
	got := decode[oapi.Method](t, e.get(t, e.admin, "/v1/methods/sulfate-ic"), http.StatusOK)
	if got.Description != body["description"] {
		t.Errorf("read back description %q", got.Description)
	}
	body["description"] = "Sulfate by ion chromatography, new column (invented method)"
	m2 := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusCreated)
	if m2.Revision != 2 || m2.Description != body["description"] {
		t.Errorf("changed description: %+v, want revision 2 with the new text", m2)
	}
}

// TestMethodWeightingOptions: a method fixes 1/x^0.5 (Almeida et al.,
// J. Chromatogr. B 774 (2002) 215) with its weighting options; its curves
// carry auto's candidate table with the advised scheme, the heaviest level,
// the fit flags and the σ basis of the limits the method chose (ICH Q2(R2)
// lets σ be the residual SD), each checked against the spec.
func TestMethodWeightingOptions(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	def := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": "nitrate-def",
		"model": "linear", "weighting": "auto", "analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L"}}}), http.StatusCreated)
	if d := calib.DefaultWeightOptions(); def.WeightingOptions.MinReplicates != d.MinReplicates ||
		string(def.WeightingOptions.LimitSigma) != string(d.LimitSigma) {
		t.Errorf("defaults %+v, want %+v", def.WeightingOptions, d)
	}
	body := map[string]any{"name": "nitrate-fixed", "model": "linear", "weighting": "1/x^0.5",
		"weighting_options": map[string]any{"min_replicates": 2, "limit_sigma": "residual_sd"},
		"analytes":          []map[string]any{{"name": "nitrate", "unit": "mg/L"}}}
	m := decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusCreated)
	if m.Weighting != "1/x^0.5" || m.WeightingOptions.MinReplicates != 2 || m.WeightingOptions.LimitSigma != "residual_sd" {
		t.Errorf("method %+v", m)
	}
	run := e.run(t, e.admin, runBody("nitrate-fixed", "photometer-7", baseTime, standards("nitrate", 1)))
	c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()), http.StatusOK)
	if c.Weighting != "1/x^0.5" || c.WeightingAdvised == nil || len(c.WeightCandidates) != 8 || c.HeaviestLevel == nil {
		t.Fatalf("curve weighting %s, advised %v, %d candidates, heaviest %v", c.Weighting, c.WeightingAdvised, len(c.WeightCandidates), c.HeaviestLevel)
	}
	chosen, advised := 0, 0
	for _, wc := range c.WeightCandidates {
		if wc.Chosen {
			chosen++
		}
		if wc.Advised {
			advised++
			if wc.Weighting != *c.WeightingAdvised {
				t.Errorf("advised candidate %s, curve says %s", wc.Weighting, *c.WeightingAdvised)
			}
		}
		// Duplicates meet the method's minimum of 2: 1/s² is scored.
		if wc.Weighting == "1/s^2" && wc.SumAbsRe == nil {
			t.Errorf("1/s^2 not scored with min_replicates 2: %+v", wc)
		}
	}
	if chosen != 1 || advised != 1 {
		t.Errorf("%d chosen, %d advised", chosen, advised)
	}
	if c.Limits.SigmaBasis == nil || *c.Limits.SigmaBasis != "residual_sd" || c.Limits.Sigma == nil || *c.Limits.Sigma != *c.ResidualSd {
		t.Errorf("limits %+v, residual SD %v", c.Limits, c.ResidualSd)
	}
	body["weighting_options"] = map[string]any{"min_replicates": 1}
	wantProblem(t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusBadRequest, "/weighting_options/min_replicates")
	body["weighting_options"] = map[string]any{"limit_sigma": "intercept_sd"}
	wantProblem(t, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusBadRequest, "/weighting_options/limit_sigma")
}
