package main

import (
	"math/rand/v2"
	"net/http"
	"slices"
	"strings"
	"time"
)

// demoMaterial is one invented standard material of the demo lab, as
// POST /v1/standard-materials takes it. Suppliers, lots and values are
// invented.
type demoMaterial struct {
	Code         string           `json:"code"`
	Kind         string           `json:"kind"`
	Analyte      string           `json:"analyte,omitempty"`
	Unit         string           `json:"unit,omitempty"`
	Value        float64          `json:"value,omitempty"`
	Expanded     float64          `json:"expanded_uncertainty,omitempty"`
	K            float64          `json:"coverage_factor,omitempty"`
	Lot          string           `json:"lot,omitempty"`
	Supplier     string           `json:"supplier,omitempty"`
	ExpiresAt    time.Time        `json:"expires_at"`
	PreparedFrom string           `json:"prepared_from,omitempty"`
	PreparedAt   *time.Time       `json:"prepared_at,omitempty"`
	Preparation  []map[string]any `json:"preparation,omitempty"`
}

// demoMaterials returns the demo lab's certificates and the stocks made
// from them, dated from end (the scenario's now): certified 1000 mg/L
// single-element solutions, and working stocks diluted 1 + 99 with class A
// glassware (tolerances from memory, common practice), prepared before the
// scenario's first run and in date through its last.
func demoMaterials(end time.Time) []demoMaterial {
	end = end.UTC()
	prepared := end.AddDate(0, 0, -demoDays-14)
	step := []map[string]any{{"aliquot_ml": 1.0, "aliquot_tol_ml": 0.008, "final_ml": 100.0, "final_tol_ml": 0.1}}
	out := []demoMaterial{}
	for _, c := range []struct{ code, analyte, unit, lot string }{
		{"DEMO-CRM-PB", "Pb", "mg/L", "PB-2291"}, {"DEMO-CRM-AS", "As", "mg/L", "AS-1187"},
		{"DEMO-CRM-NO3N", "NO3-N", "mg/L", "NN-0402"},
	} {
		out = append(out, demoMaterial{Code: c.code, Kind: "reference_material", Analyte: c.analyte, Unit: c.unit,
			Value: 1000, Expanded: 3, K: 2, Lot: c.lot, Supplier: "invented reference supplier",
			ExpiresAt: end.AddDate(1, 0, 0)})
		out = append(out, demoMaterial{Code: strings.Replace(c.code, "CRM", "STOCK", 1), Kind: "stock_solution",
			PreparedFrom: c.code, PreparedAt: &prepared, Preparation: step, ExpiresAt: end.AddDate(0, 3, 0)})
	}
	// A certified control at the middle of the nitrate range, measured as a
	// verification standard: the bias data of the top-down estimate.
	out = append(out, demoMaterial{Code: demoNitrateQCMaterial, Kind: "reference_material", Analyte: "NO3-N", Unit: "mg/L",
		Value: demoNitrateQCValue, Expanded: 0.08, K: 2, Lot: "NQ-0077", Supplier: "invented reference supplier",
		ExpiresAt: end.AddDate(1, 0, 0)})
	return out
}

// The demo's certified nitrate control (value in mg/L).
const (
	demoNitrateQCMaterial = "DEMO-CRM-NO3N-QC"
	demoNitrateQCValue    = 5.0
)

// demoNitrateVerifications are the verification standards measured
// against a nitrate run's curve: an ICV and a CCV at 5 mg/L and, on every
// other run (k odd), the certified control, read as 1.5 % high (an
// invented small bias), all with a 1.5 % relative scatter. rng is the
// verifications' own, so the runs' values stay as they were.
func demoNitrateVerifications(rng *rand.Rand, r demoRun, k int) []map[string]any {
	read := func(x float64) []float64 {
		return []float64{round(interpolate(r.Standards, "NO3-N", x)*(1+0.015*rng.NormFloat64()), 5)}
	}
	at := func(m int) string { return r.AcquiredAt.Add(time.Duration(m) * time.Minute).Format(time.RFC3339) }
	out := []map[string]any{
		{"kind": "initial", "level": "ICV-5", "concentration": 5.0, "responses": read(5), "acquired_at": at(20)},
		{"kind": "continuing", "level": "CCV-5", "concentration": 5.0, "responses": read(5), "acquired_at": at(90)},
	}
	if k%2 == 1 {
		out = append(out, map[string]any{"kind": "continuing", "level": "CRM-5", "concentration": demoNitrateQCValue,
			"responses": read(demoNitrateQCValue * 1.015), "acquired_at": at(60), "material": demoNitrateQCMaterial})
	}
	return out
}

// demoNitrateLimit is the demo lab's drinking-water limit for nitrate as N,
// in mg/L. It is invented for the scenario, not any regulator's value.
const demoNitrateLimit = 9.0

// demoNitrateUncertainty is the nitrate method's uncertainty budget: the
// calibration term, the run's certified stock, the repeatability of the
// sample's two readings, k from t(ν_eff); U is the larger of that and the
// top-down estimate from the QC history (the verification standards), and
// conformity with the invented limit is judged under a guard band w = U.
var demoNitrateUncertainty = map[string]any{
	"terms":    []string{"calibration", "standards", "repeatability"},
	"approach": "larger", "top_down_source": "history",
	"limits": map[string]any{"upper": demoNitrateLimit, "rule": "guard_band_u"},
}

// demoStockFor names the demo stock of each analyte, for a run's
// standard_materials.
func demoStockFor(analyte string) string {
	return map[string]string{"Pb": "DEMO-STOCK-PB", "As": "DEMO-STOCK-AS", "NO3-N": "DEMO-STOCK-NO3N"}[analyte]
}

// demoRunMaterials names the stocks of the analytes r calibrates.
func demoRunMaterials(r demoRun) []string {
	var out []string
	for _, st := range r.Standards {
		if c := demoStockFor(st.Analyte); c != "" && !slices.Contains(out, c) {
			out = append(out, c)
		}
	}
	return out
}

// demoRecordMaterials records the demo materials; those an earlier demo
// recorded are kept as they are (records are never changed).
func demoRecordMaterials(d *demoClient, admin string, end time.Time) error {
	var have struct {
		Materials []struct {
			Code string `json:"code"`
		} `json:"materials"`
	}
	if err := d.do(admin, http.MethodGet, "/v1/standard-materials", nil, &have); err != nil {
		return err
	}
	known := map[string]bool{}
	for _, m := range have.Materials {
		known[m.Code] = true
	}
	for _, m := range demoMaterials(end) {
		if known[m.Code] {
			continue
		}
		if err := d.do(admin, http.MethodPost, "/v1/standard-materials", m, nil); err != nil {
			return err
		}
	}
	return nil
}
