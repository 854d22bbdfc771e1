package api_test

import (
	"math"
	"net/http"
	"testing"
	"time"

	"curvekeeper/api/oapi"
)

// TestStandardMaterials records a certified reference material, a stock
// prepared from it and a calibration level prepared from the stock; a run
// naming the level gets the standards_in_date check, which fails the curve
// once the reference material has expired at the run's acquisition time.
func TestStandardMaterials(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate", "phosphate")
	expiry := baseTime.Add(30 * 24 * time.Hour)
	crm := decode[oapi.StandardMaterial](t, e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{
		"code": "CRM-NO3-A", "kind": "reference_material", "analyte": "nitrate", "unit": "mg/L", "value": 1000.0,
		"expanded_uncertainty": 2.0, "coverage_factor": 2.0, "lot": "L-0421", "supplier": "invented supplier",
		"expires_at": expiry.Format(time.RFC3339)}), http.StatusCreated)
	// u = U/k = 1 mg/L, relative 0.001 (JCGM 100 §4.3.3; hand computation).
	if math.Abs(crm.RelativeUncertainty-0.001) > 1e-12 {
		t.Errorf("CRM relative uncertainty %v, want 0.001", crm.RelativeUncertainty)
	}
	stock := decode[oapi.StandardMaterial](t, e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{
		"code": "STOCK-NO3-1", "kind": "stock_solution", "prepared_from": "CRM-NO3-A",
		"prepared_at": baseTime.Add(-24 * time.Hour).Format(time.RFC3339), "expires_at": expiry.Format(time.RFC3339),
		"preparation": []map[string]any{{"aliquot_ml": 10.0, "aliquot_tol_ml": 0.02, "final_ml": 100.0, "final_tol_ml": 0.1}}}),
		http.StatusCreated)
	// value = 1000·10/100 = 100 mg/L; u_rel = √(0.001² + (0.02/(√3·10))² +
	// (0.1/(√3·100))²) = 0.0016330 (JCGM 100 §5.1.6 for a product, tolerances
	// rectangular after Eurachem/CITAC QUAM App. E.1; hand computation).
	if stock.Value != 100 || stock.Analyte != "nitrate" || stock.Unit != "mg/L" {
		t.Errorf("stock %+v, want 100 mg/L nitrate", stock)
	}
	if math.Abs(stock.RelativeUncertainty-0.00163299) > 1e-8 {
		t.Errorf("stock relative uncertainty %v, want 0.00163299", stock.RelativeUncertainty)
	}
	decode[oapi.StandardMaterial](t, e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{
		"code": "CAL-NO3-L3", "kind": "calibration_level", "level": "L3", "prepared_from": "STOCK-NO3-1",
		"expires_at":  baseTime.Add(60 * 24 * time.Hour).Format(time.RFC3339),
		"preparation": []map[string]any{{"aliquot_ml": 2.0, "aliquot_tol_ml": 0.01, "final_ml": 100.0, "final_tol_ml": 0.1}}}),
		http.StatusCreated)

	// A code is used once; a prepared material states no certificate.
	wantProblem(t, e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{
		"code": "CRM-NO3-A", "kind": "reference_material", "analyte": "nitrate", "unit": "mg/L", "value": 5.0,
		"tolerance": 0.1, "expires_at": expiry.Format(time.RFC3339)}), http.StatusConflict, "")
	wantProblem(t, e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{
		"code": "STOCK-X", "kind": "stock_solution", "prepared_from": "CRM-NO3-A", "value": 3.0,
		"expires_at":  expiry.Format(time.RFC3339),
		"preparation": []map[string]any{{"aliquot_ml": 1.0, "aliquot_tol_ml": 0.01, "final_ml": 10.0, "final_tol_ml": 0.02}}}),
		http.StatusUnprocessableEntity, "/value")
	// Reading needs results:read; recording needs admin.
	_, lims := e.token(t, "lims-1", "results:read")
	list := decode[oapi.StandardMaterialList](t, e.get(t, lims, "/v1/standard-materials"), http.StatusOK)
	if len(list.Materials) != 3 {
		t.Errorf("listed %d materials, want 3", len(list.Materials))
	}
	wantProblem(t, e.postJSON(t, lims, "/v1/standard-materials", map[string]any{"code": "X", "kind": "reference_material",
		"expires_at": expiry.Format(time.RFC3339)}), http.StatusForbidden, "")

	check := func(t *testing.T, run oapi.RunCreated) (oapi.Check, oapi.Curve) {
		t.Helper()
		c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()), http.StatusOK)
		for _, ch := range c.Checks {
			if ch.Name == oapi.CheckStandardsInDate {
				return ch, c
			}
		}
		t.Fatalf("curve has no standards_in_date check: %+v", c.Checks)
		return oapi.Check{}, c
	}

	t.Run("in date", func(t *testing.T) {
		body := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))
		body["standard_materials"] = []string{"CAL-NO3-L3"}
		run := e.run(t, e.admin, body)
		ch, _ := check(t, run)
		if !ch.Passed || !ch.Mandatory || run.Curves[0].Verdict != oapi.VerdictPass {
			t.Errorf("check %+v, verdict %s; want a passed mandatory check and a passing curve", ch, run.Curves[0].Verdict)
		}
		got := decode[oapi.Run](t, e.get(t, e.admin, "/v1/runs/"+run.ID.String()), http.StatusOK)
		if got.StandardMaterials == nil || len(*got.StandardMaterials) != 1 || (*got.StandardMaterials)[0] != "CAL-NO3-L3" {
			t.Errorf("run's standard_materials %v, want [CAL-NO3-L3]", got.StandardMaterials)
		}
	})
	t.Run("stock expired", func(t *testing.T) {
		// The level itself is in date; the reference material it was
		// prepared from (through the stock) expired at exactly this time.
		body := runBody("nitrate-uv", "photometer-7", expiry, standards("nitrate", 2))
		body["standard_materials"] = []string{"CAL-NO3-L3"}
		run := e.run(t, e.admin, body)
		ch, _ := check(t, run)
		if ch.Passed || !ch.Mandatory || run.Curves[0].Verdict != oapi.VerdictFail {
			t.Errorf("check %+v, verdict %s; want a failed mandatory check and a failing curve", ch, run.Curves[0].Verdict)
		}
		if ch.Statistic == nil || *ch.Statistic != 2 {
			t.Errorf("statistic %v, want 2 (the CRM and the stock expired)", ch.Statistic)
		}
	})
	t.Run("advisory", func(t *testing.T) {
		r := e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": "nitrate-adv", "model": "linear",
			"weighting": "none", "expired_standards": "advisory",
			"analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L"}}})
		m := decode[oapi.Method](t, r, http.StatusCreated)
		if m.ExpiredStandards == nil || *m.ExpiredStandards != oapi.MethodExpiredStandardsAdvisory {
			t.Errorf("method expired_standards %v, want advisory", m.ExpiredStandards)
		}
		body := runBody("nitrate-adv", "photometer-7", expiry, standards("nitrate", 3))
		body["standard_materials"] = []string{"STOCK-NO3-1"}
		run := e.run(t, e.admin, body)
		ch, _ := check(t, run)
		if ch.Passed || ch.Mandatory || run.Curves[0].Verdict != oapi.VerdictPass {
			t.Errorf("check %+v, verdict %s; want a failed advisory check and a passing curve", ch, run.Curves[0].Verdict)
		}
	})
	t.Run("unknown or foreign material", func(t *testing.T) {
		body := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 4))
		body["standard_materials"] = []string{"NO-SUCH"}
		wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", body), http.StatusUnprocessableEntity, "/standard_materials/0")
		decode[oapi.StandardMaterial](t, e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{
			"code": "CRM-PO4", "kind": "reference_material", "analyte": "phosphate", "unit": "mg/L", "value": 1000.0,
			"tolerance": 5.0, "expires_at": expiry.Format(time.RFC3339)}), http.StatusCreated)
		body["standard_materials"] = []string{"CRM-PO4"}
		wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", body), http.StatusUnprocessableEntity, "/standard_materials/0")
	})
}
