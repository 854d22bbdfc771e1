package api_test

import (
	"bytes"
	"encoding/csv"
	"net/http"
	"strconv"
	"testing"

	"github.com/samply/golang-fhir-models/fhir-models/fhir"

	"curvekeeper/api/oapi"
)

// TestRunResultsFormats reads a run's results as JSON, as a FHIR R4 Bundle
// (parsed back with the FHIR models) and as CSV (parsed back with
// encoding/csv), and checks the three say the same values.
func TestRunResultsFormats(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	body := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))
	body["samples"] = []map[string]any{{"id": "W-1", "analyte": "nitrate", "responses": []float64{1.55, 1.56}},
		{"id": "W-2", "analyte": "nitrate", "responses": []float64{2.6}, "dilution": 2.0}}
	run := e.run(t, e.admin, body)
	path := "/v1/runs/" + run.ID.String() + "/results"
	js := decode[oapi.RunResults](t, e.get(t, e.admin, path), http.StatusOK)
	if len(js.Results) != 2 || js.Results[0].Concentration == nil || js.Results[1].Concentration == nil {
		t.Fatalf("JSON results %+v, want two with values", js.Results)
	}

	r := e.do(t, call{method: http.MethodGet, path: path, token: e.admin, header: map[string]string{"Accept": "application/fhir+json"}})
	if r.status != http.StatusOK || r.header.Get("Content-Type") != "application/fhir+json" {
		t.Fatalf("FHIR: %s", r)
	}
	b, err := fhir.UnmarshalBundle(r.body)
	if err != nil {
		t.Fatalf("the FHIR models do not read the Bundle: %v", err)
	}
	if b.Type != fhir.BundleTypeCollection || len(b.Entry) != 2 {
		t.Fatalf("bundle type %v with %d entries, want a collection of 2", b.Type, len(b.Entry))
	}
	for i, en := range b.Entry {
		o, err := fhir.UnmarshalObservation(en.Resource)
		if err != nil {
			t.Fatalf("entry %d: %v", i, err)
		}
		want := *js.Results[i].Concentration
		got, _ := strconv.ParseFloat(string(*o.ValueQuantity.Value), 64)
		if got != want || *o.ValueQuantity.Code != "mg/L" || *o.ValueQuantity.System != "http://unitsofmeasure.org" {
			t.Errorf("entry %d: value %v %s (%s), want %v mg/L in UCUM", i, got, *o.ValueQuantity.Code, *o.ValueQuantity.System, want)
		}
		// The curve awaits review: provisional → preliminary.
		if o.Status != fhir.ObservationStatusPreliminary {
			t.Errorf("entry %d: status %v, want preliminary", i, o.Status)
		}
		if o.Device == nil || *o.Device.Display != "photometer-7" {
			t.Errorf("entry %d: device %+v, want photometer-7", i, o.Device)
		}
	}

	r = e.do(t, call{method: http.MethodGet, path: path, token: e.admin, header: map[string]string{"Accept": "text/csv"}})
	if r.status != http.StatusOK || r.header.Get("Content-Type") != "text/csv" {
		t.Fatalf("CSV: %s", r)
	}
	rows, err := csv.NewReader(bytes.NewReader(r.body)).ReadAll()
	if err != nil {
		t.Fatalf("CSV does not parse (RFC 4180, encoding/csv): %v", err)
	}
	if len(rows) != 3 || rows[0][0] != "sample_id" || rows[1][0] != "W-1" || rows[2][0] != "W-2" {
		t.Fatalf("CSV rows %q", rows)
	}
	for i, row := range rows[1:] {
		got, err := strconv.ParseFloat(row[2], 64)
		if err != nil || got != *js.Results[i].Concentration || row[3] != "mg/L" || row[11] != "photometer-7" {
			t.Errorf("CSV row %d %q, want value %v mg/L from photometer-7", i, row, *js.Results[i].Concentration)
		}
	}
}
