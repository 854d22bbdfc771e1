// Package fhir maps quantitative laboratory results to FHIR R4 resources:
// an Observation per result (value as a UCUM Quantity with its standard
// uncertainty in the iso21090-uncertainty extension) and a Bundle of type
// collection for a batch. It uses the generated R4 models of
// github.com/samply/golang-fhir-models.
//
// Every Observation carries export.Caution in its note: the laboratory's
// accreditation, its regulator and its SOP come first, and a qualified
// person reviews results. The receiving system's profiles are the
// laboratory's to configure and validate.
package fhir

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"strconv"
	"time"

	"curvekeeper/calib"
	"curvekeeper/export"

	"github.com/samply/golang-fhir-models/fhir-models/fhir"
)

// Code systems and extension URLs used (FHIR R4).
const (
	UCUM                  = "http://unitsofmeasure.org"
	InterpretationSystem  = "http://terminology.hl7.org/CodeSystem/v3-ObservationInterpretation"
	DataAbsentSystem      = "http://terminology.hl7.org/CodeSystem/data-absent-reason"
	UncertaintyURL        = "http://hl7.org/fhir/StructureDefinition/iso21090-uncertainty"
	UncertaintyTypeURL    = "http://hl7.org/fhir/StructureDefinition/iso21090-uncertaintyType"
	CategorySystem        = "http://terminology.hl7.org/CodeSystem/observation-category"
	DefaultCurveIDSystem  = "urn:curvekeeper:curve"
	dateTimeLayout        = time.RFC3339
	uncertaintyTypeNormal = "N" // v3 ProbabilityDistributionType: normal
	uncertaintyTypeT      = "T" // v3 ProbabilityDistributionType: Student's t
)

// Result is one quantitative result to export.
type Result struct {
	ID string // Observation.id, optional ([A-Za-z0-9\-\.]{1,64})
	// Code, CodeSystem, CodeDisplay: Observation.code, the analyte (e.g. a
	// LOINC code with system http://loinc.org, or a local code system).
	Code, CodeSystem, CodeDisplay string
	// Value, or ValueText when set (the result rounded to the place of its
	// uncertainty, kept as written: FHIR decimals keep their precision).
	Value     float64
	ValueText string
	// UnitCode is the UCUM code; UnitDisplay the human unit (the code when empty).
	UnitCode, UnitDisplay string
	// ReleaseState is the service's plain release state (export.Release*);
	// Corrected marks a result that replaces one already released.
	ReleaseState string
	Corrected    bool
	Effective    time.Time // Observation.effectiveDateTime (acquisition); zero: omitted
	Issued       time.Time // Observation.issued; zero: omitted
	// Interpretation holds v3 ObservationInterpretation codes (H, L, HH,
	// LL, N, A, …) from the result's flags.
	Interpretation []string
	// Conformity, when set, adds the statement's interpretation (see
	// ConformityInterpretation) and its wording to the notes.
	Conformity *calib.Conformity
	Device     string // the instrument's name: Observation.device.display
	// CurveID refers to the calibration curve the value was read from
	// (Observation.derivedFrom, a logical reference by identifier in
	// CurveIDSystem, DefaultCurveIDSystem when empty).
	CurveID, CurveIDSystem string
	Method                 string // Observation.method.text
	// Uncertainty: the combined standard uncertainty u_c goes into the
	// iso21090-uncertainty extension (defined as a standard deviation);
	// Expanded, CoverageFactor and Level are stated in a note.
	// StandardUncertainty 0 with Expanded and CoverageFactor set means
	// U/k. StudentT marks a k from t(ν_eff) (uncertaintyType T, else N).
	StandardUncertainty float64
	Expanded            float64
	ExpandedText        string // U as written, e.g. "0.89"; optional
	CoverageFactor      float64
	Level               float64 // e.g. 0.95
	StudentT            bool
	Notes               []string
}

// Status maps a release state to Observation.status: releasable → final
// (corrected when it replaces a released result); provisional →
// preliminary; withheld → cancelled, with no value and a dataAbsentReason.
// An unknown state is an error.
func Status(releaseState string, corrected bool) (fhir.ObservationStatus, error) {
	switch releaseState {
	case export.ReleaseReleasable:
		if corrected {
			return fhir.ObservationStatusCorrected, nil
		}
		return fhir.ObservationStatusFinal, nil
	case export.ReleaseProvisional:
		return fhir.ObservationStatusPreliminary, nil
	case export.ReleaseWithheld:
		return fhir.ObservationStatusCancelled, nil
	}
	return fhir.ObservationStatusUnknown, fmt.Errorf("fhir: unknown release state %q", releaseState)
}

// ConformityInterpretation returns the v3 ObservationInterpretation code of
// a conformity statement: pass → N (normal: within the specification);
// conditional pass or fail → IND (indeterminate: too close to a limit to
// state conformity at the level of U); fail above an upper limit → HX,
// below a lower limit → LX (outside threshold).
func ConformityInterpretation(c calib.Conformity) string {
	switch c.Outcome {
	case calib.OutcomePass:
		return "N"
	case calib.OutcomeConditionalPass, calib.OutcomeConditionalFail:
		return "IND"
	}
	if c.Spec.HasUpper && c.Result > c.Spec.Upper {
		return "HX"
	}
	return "LX"
}

func str(s string) *string { return &s }

// validID reports whether id matches the R4 id type, [A-Za-z0-9\-\.]{1,64}.
func validID(id string) bool {
	if len(id) < 1 || len(id) > 64 {
		return false
	}
	for i := 0; i < len(id); i++ {
		c := id[i]
		if !(c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || c == '-' || c == '.') {
			return false
		}
	}
	return true
}

// Observation returns the FHIR R4 Observation of r, category laboratory.
// Preconditions: a code, a UCUM unit code, a known release state, a finite
// value (ValueText, when given, a JSON number), uncertainties finite ≥ 0.
func Observation(r Result) (fhir.Observation, error) {
	if r.Code == "" {
		return fhir.Observation{}, errors.New("fhir: result needs a code")
	}
	if r.UnitCode == "" {
		return fhir.Observation{}, errors.New("fhir: result needs a UCUM unit code (\"1\" for a unitless value)")
	}
	status, err := Status(r.ReleaseState, r.Corrected)
	if err != nil {
		return fhir.Observation{}, err
	}
	value := r.ValueText
	if value == "" {
		if math.IsNaN(r.Value) || math.IsInf(r.Value, 0) {
			return fhir.Observation{}, errors.New("fhir: value is not a finite number")
		}
		value = strconv.FormatFloat(r.Value, 'f', -1, 64)
	}
	if f, err := strconv.ParseFloat(value, 64); err != nil || math.IsInf(f, 0) || !json.Valid([]byte(value)) {
		return fhir.Observation{}, fmt.Errorf("fhir: value %q is not a decimal", value)
	}
	for _, v := range []float64{r.StandardUncertainty, r.Expanded, r.CoverageFactor, r.Level} {
		if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
			return fhir.Observation{}, errors.New("fhir: uncertainties, coverage factor and level must be finite and ≥ 0")
		}
	}
	o := fhir.Observation{
		Status: status,
		Category: []fhir.CodeableConcept{{Coding: []fhir.Coding{{System: str(CategorySystem),
			Code: str("laboratory"), Display: str("Laboratory")}}}},
		Code: fhir.CodeableConcept{Coding: []fhir.Coding{{Code: str(r.Code)}}},
	}
	if r.ID != "" {
		if !validID(r.ID) {
			return fhir.Observation{}, fmt.Errorf("fhir: id %q is not an R4 id ([A-Za-z0-9-.]{1,64})", r.ID)
		}
		o.Id = str(r.ID)
	}
	if r.CodeSystem != "" {
		o.Code.Coding[0].System = str(r.CodeSystem)
	}
	if r.CodeDisplay != "" {
		o.Code.Coding[0].Display = str(r.CodeDisplay)
		o.Code.Text = str(r.CodeDisplay)
	}
	if !r.Effective.IsZero() {
		o.EffectiveDateTime = str(r.Effective.Format(dateTimeLayout))
	}
	if !r.Issued.IsZero() {
		o.Issued = str(r.Issued.Format(dateTimeLayout))
	}
	if status == fhir.ObservationStatusCancelled {
		o.DataAbsentReason = &fhir.CodeableConcept{Coding: []fhir.Coding{{System: str(DataAbsentSystem), Code: str("error")}},
			Text: str("withheld: the result is not released")}
	} else {
		o.ValueQuantity = quantity(r, value)
	}
	for _, c := range r.Interpretation {
		o.Interpretation = append(o.Interpretation, fhir.CodeableConcept{Coding: []fhir.Coding{{System: str(InterpretationSystem), Code: str(c)}}})
	}
	var notes []string
	if c := r.Conformity; c != nil {
		o.Interpretation = append(o.Interpretation, fhir.CodeableConcept{
			Coding: []fhir.Coding{{System: str(InterpretationSystem), Code: str(ConformityInterpretation(*c))}},
			Text:   str("conformity: " + c.Outcome + " (" + string(c.Rule) + ")")})
		notes = append(notes, conformityNote(*c))
	}
	if r.Device != "" {
		o.Device = &fhir.Reference{Display: str(r.Device)}
	}
	if r.CurveID != "" {
		sys := r.CurveIDSystem
		if sys == "" {
			sys = DefaultCurveIDSystem
		}
		o.DerivedFrom = []fhir.Reference{{Identifier: &fhir.Identifier{System: str(sys), Value: str(r.CurveID)},
			Display: str("calibration curve " + r.CurveID)}}
	}
	if r.Method != "" {
		o.Method = &fhir.CodeableConcept{Text: str(r.Method)}
	}
	if n := uncertaintyNote(r); n != "" {
		notes = append(notes, n)
	}
	notes = append(notes, r.Notes...)
	notes = append(notes, export.Caution)
	for _, n := range notes {
		o.Note = append(o.Note, fhir.Annotation{Text: n})
	}
	return o, nil
}

// quantity returns the valueQuantity with the uncertainty extensions.
func quantity(r Result, value string) *fhir.Quantity {
	unit := r.UnitDisplay
	if unit == "" {
		unit = r.UnitCode
	}
	v := json.Number(value)
	q := &fhir.Quantity{Value: &v, Unit: str(unit), System: str(UCUM), Code: str(r.UnitCode)}
	u := standardUncertainty(r)
	if u > 0 {
		un := json.Number(strconv.FormatFloat(u, 'g', 6, 64))
		typ := uncertaintyTypeNormal
		if r.StudentT {
			typ = uncertaintyTypeT
		}
		q.Extension = []fhir.Extension{{Url: UncertaintyURL, ValueDecimal: &un}, {Url: UncertaintyTypeURL, ValueCode: str(typ)}}
	}
	return q
}

// standardUncertainty is u_c, or U/k when only those are given.
func standardUncertainty(r Result) float64 {
	if r.StandardUncertainty > 0 {
		return r.StandardUncertainty
	}
	if r.Expanded > 0 && r.CoverageFactor > 0 {
		return r.Expanded / r.CoverageFactor
	}
	return 0
}

// uncertaintyNote states U with its coverage (export.UncertaintyStatement).
func uncertaintyNote(r Result) string {
	if !(r.Expanded > 0) {
		return ""
	}
	u := r.ExpandedText
	if u == "" {
		u = strconv.FormatFloat(r.Expanded, 'g', 2, 64)
	}
	unit := r.UnitDisplay
	if unit == "" {
		unit = r.UnitCode
	}
	return export.UncertaintyStatement(u, unit, r.CoverageFactor, r.Level)
}

// conformityNote is the conformity statement in words.
func conformityNote(c calib.Conformity) string {
	spec := ""
	if c.Spec.HasLower {
		spec += "lower limit " + strconv.FormatFloat(c.Spec.Lower, 'g', -1, 64)
	}
	if c.Spec.HasUpper {
		if spec != "" {
			spec += ", "
		}
		spec += "upper limit " + strconv.FormatFloat(c.Spec.Upper, 'g', -1, 64)
	}
	if c.Spec.Unit != "" {
		spec += " " + c.Spec.Unit
	}
	return "Conformity (" + string(c.Rule) + ", " + spec + "): " + c.Outcome + ". " + c.Risk
}

// Bundle returns a Bundle of type collection holding one Observation per
// result, stamped with timestamp (injected; zero: omitted).
func Bundle(results []Result, timestamp time.Time) (fhir.Bundle, error) {
	if len(results) == 0 {
		return fhir.Bundle{}, errors.New("fhir: a bundle needs at least one result")
	}
	b := fhir.Bundle{Type: fhir.BundleTypeCollection}
	if !timestamp.IsZero() {
		b.Timestamp = str(timestamp.Format(dateTimeLayout))
	}
	for i, r := range results {
		o, err := Observation(r)
		if err != nil {
			return fhir.Bundle{}, fmt.Errorf("fhir: result %d: %w", i, err)
		}
		raw, err := o.MarshalJSON()
		if err != nil {
			return fhir.Bundle{}, fmt.Errorf("fhir: result %d: %w", i, err)
		}
		b.Entry = append(b.Entry, fhir.BundleEntry{Resource: raw})
	}
	return b, nil
}
