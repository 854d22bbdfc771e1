package api_test

import (
	"bytes"
	"encoding/csv"
	"net/http"
	"slices"
	"strconv"
	"strings"
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
	// Columns keep their positions (new ones are appended): a LIMS may
	// read them by index.
	instrument := 11
	if slices.Index(rows[0], "instrument") != instrument || slices.Index(rows[0], "caution") != 13 {
		t.Errorf("CSV header %q moved a column", rows[0])
	}
	for i, row := range rows[1:] {
		got, err := strconv.ParseFloat(row[2], 64)
		if err != nil || got != *js.Results[i].Concentration || row[3] != "mg/L" || row[instrument] != "photometer-7" {
			t.Errorf("CSV row %d %q, want value %v mg/L from photometer-7", i, row, *js.Results[i].Concentration)
		}
	}

	// HL7 v2.5.1 ORU^R01 (ER7): one message per sample; read back with a
	// small reader (segments end with CR, fields split by |, components by ^,
	// as HL7 v2.5.1 chapter 2 defines the encoding characters).
	r = e.do(t, call{method: http.MethodGet, path: path, token: e.admin, header: map[string]string{"Accept": "x-application/hl7-v2+er7"}})
	if r.status != http.StatusOK || r.header.Get("Content-Type") != "x-application/hl7-v2+er7" {
		t.Fatalf("HL7: %s", r)
	}
	msg := string(r.body)
	if !strings.HasSuffix(msg, "\r") || strings.Contains(msg, "\n") {
		t.Fatalf("segments must end with CR and hold no LF: %q", msg)
	}
	var msh, obr, obx [][]string
	for _, seg := range strings.Split(strings.TrimSuffix(msg, "\r"), "\r") {
		f := strings.Split(seg, "|")
		switch f[0] {
		case "MSH":
			msh = append(msh, f)
		case "OBR":
			obr = append(obr, f)
		case "OBX":
			obx = append(obx, f)
		}
	}
	if len(msh) != 2 || len(obr) != 2 || len(obx) != 2 {
		t.Fatalf("%d MSH, %d OBR, %d OBX; want one message with one OBX per sample: %q", len(msh), len(obr), len(obx), msg)
	}
	for i := range msh {
		// MSH-9 (the 8th piece, MSH-1 being the separator) and MSH-12.
		if msh[i][8] != "ORU^R01^ORU_R01" || msh[i][11] != "2.5.1" {
			t.Errorf("message %d: MSH-9 %q, MSH-12 %q; want ORU^R01^ORU_R01, 2.5.1", i, msh[i][8], msh[i][11])
		}
		if obr[i][3] != js.Results[i].SampleID {
			t.Errorf("message %d: OBR-3 %q, want the sample id %s", i, obr[i][3], js.Results[i].SampleID)
		}
		o := obx[i]
		got, err := strconv.ParseFloat(o[5], 64)
		if o[2] != "NM" || err != nil || got != *js.Results[i].Concentration {
			t.Errorf("message %d: OBX-2 %q OBX-5 %q, want NM %v", i, o[2], o[5], *js.Results[i].Concentration)
		}
		if strings.Split(o[6], "^")[0] != "mg/L" || o[11] != "P" || o[18] != "photometer-7" {
			t.Errorf("message %d: OBX-6 %q OBX-11 %q OBX-18 %q; want mg/L, P (provisional), photometer-7", i, o[6], o[11], o[18])
		}
	}
}
