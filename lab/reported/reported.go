// Package reported turns a calibrated concentration into the value a
// laboratory reports: preparation factors applied, converted to the
// method's reporting unit, rounded by the method's rule and qualified
// against its reporting and detection limits.
//
// Every reported value carries the caution that local accreditation,
// regulation and the laboratory's SOP come first and that a qualified person
// reviews results before release (Value.Cautions). The qualifier codes and
// words below are this product's own defaults; a laboratory configures its
// own.
package reported

import (
	"fmt"
	"math"
	"strconv"

	"curvekeeper/calib"
	"curvekeeper/lab/ucum"
)

// Qualifier is a code and its words, printed beside a result.
type Qualifier struct {
	Code  string
	Words string
}

// Qualifiers is a method's set of qualifiers. Empty entries take
// DefaultQualifiers' entry.
type Qualifiers struct {
	BelowRL   Qualifier // below the reporting limit (and the detection limit, when one is set): "< RL"
	Estimated Qualifier // between the detection and the reporting limit: a value, estimated
	OverRange Qualifier // above the highest calibration standard: dilute and re-run
	ISFailure Qualifier // internal-standard response outside its window
}

// DefaultQualifiers returns curvekeeper's own default codes and words. They
// copy no agency's or vendor's list; a laboratory sets its own.
func DefaultQualifiers() Qualifiers {
	return Qualifiers{
		BelowRL:   Qualifier{"LT", "less than the reporting limit: not quantified"},
		Estimated: Qualifier{"EV", "estimated value: detected, but below the reporting limit"},
		OverRange: Qualifier{"OR", "above the highest calibration standard: dilute and re-run"},
		ISFailure: Qualifier{"IS", "internal-standard response outside the method's window: result suspect"},
	}
}

// Method is a method's reporting rules.
type Method struct {
	Unit           string // the reporting unit, a UCUM code (lab/ucum)
	Rounding       Rounding
	ReportingLimit float64 // in Unit; 0: none
	DetectionLimit float64 // in Unit; 0: none; must not exceed the reporting limit
	Qualifiers     Qualifiers
}

// Sample is one calibrated result and its preparation.
type Sample struct {
	X0     float64 // x̂0, the concentration read from the curve
	X0Unit string  // its UCUM unit, e.g. ug/L in the measured solution

	Dilution float64 // dilution of the measured solution, ≥ 1; 0: 1

	// SampleAmount of SampleAmountUnit (mass or volume) taken and made up to
	// FinalVolume of FinalVolumeUnit; both or neither (0).
	SampleAmount     float64
	SampleAmountUnit string
	FinalVolume      float64
	FinalVolumeUnit  string

	// DryFraction is the dry-matter fraction, 0 < f ≤ 1, to report on a
	// dry-weight basis; 0: as received.
	DryFraction float64

	// HighestStandard is the highest calibration standard, in X0Unit; 0:
	// the over-range check is not made.
	HighestStandard float64

	ISFailed bool   // the internal-standard check failed
	ISDetail string // its words, e.g. the recovery
}

// Factor is one factor applied to x̂0.
type Factor struct {
	Name  string
	Value float64
	Unit  string // "1" for pure numbers
	Op    string // "×" or "÷"
}

// Value is a reported value with everything that made it.
type Value struct {
	X0     float64
	X0Unit string

	Factors          []Factor
	ComputedUnit     string  // the unit of x̂0 with the factors applied, before conversion
	ConversionFactor float64 // ComputedUnit → Unit

	Result  float64 // unrounded, in Unit
	Unit    string
	Rounded float64 // Result rounded by the rule; 0 when Text is "< RL"
	Text    string  // what the report prints: "15.4" or "< 20"
	Rule    string  // the rounding rule in words

	ReportingLimit float64
	DetectionLimit float64
	Qualifiers     []Qualifier
	Action         string // what to do next, e.g. dilute and re-run
	Cautions       []string
}

// Error reports input that cannot be reported; Field names it.
type Error struct {
	Field  string
	Reason string
}

func (e *Error) Error() string { return "reported: " + e.Field + ": " + e.Reason }

func inputErr(field, format string, args ...any) error {
	return &Error{Field: field, Reason: fmt.Sprintf(format, args...)}
}

// Report computes the reported value:
//
//	result = x̂0 × D × (V_final / amount) ÷ f_dry, converted from
//	X0Unit·FinalVolumeUnit/SampleAmountUnit to the method's unit
//
// then rounds it and qualifies the unrounded result (so that rounding never
// moves a result across a limit):
//
//   - result < RL and (no DL or result < DL): printed "< RL", BelowRL;
//   - DL ≤ result < RL: the rounded value, Estimated;
//   - x̂0 (undiluted, as read) > the highest standard: OverRange, action
//     "dilute and re-run" (TNI 2016 V1M4 §1.7.1.1 allows no quantitative
//     result above the highest standard);
//   - a failed internal-standard check: ISFailure.
//
// x̂0 and every factor stay in the output. Errors: non-finite or
// out-of-range inputs, unknown units, units that do not convert (mg/L to
// mg/kg without a sample mass), as a *Error naming the field.
func Report(s Sample, m Method) (Value, error) {
	q, err := checkMethod(&m)
	if err != nil {
		return Value{}, err
	}
	if err := checkSample(&s); err != nil {
		return Value{}, err
	}
	v := Value{X0: s.X0, X0Unit: s.X0Unit, Unit: m.Unit, ReportingLimit: m.ReportingLimit,
		DetectionLimit: m.DetectionLimit, Rule: m.Rounding.String(), Cautions: calib.Cautions()}
	raw := s.X0
	unit := s.X0Unit
	if s.Dilution != 1 {
		raw *= s.Dilution
		v.Factors = append(v.Factors, Factor{"dilution", s.Dilution, "1", "×"})
	}
	if s.SampleAmount != 0 {
		raw = raw * s.FinalVolume / s.SampleAmount
		unit = unit + "." + s.FinalVolumeUnit + "/" + s.SampleAmountUnit // left to right: ((x̂0 unit)·V)/amount
		v.Factors = append(v.Factors, Factor{"final volume", s.FinalVolume, s.FinalVolumeUnit, "×"},
			Factor{"sample amount", s.SampleAmount, s.SampleAmountUnit, "÷"})
	}
	if s.DryFraction != 1 {
		raw /= s.DryFraction
		v.Factors = append(v.Factors, Factor{"dry-matter fraction", s.DryFraction, "1", "÷"})
	}
	k, err := ucum.Factor(unit, m.Unit)
	if err != nil {
		return Value{}, inputErr("unit", "%v", err)
	}
	v.ComputedUnit, v.ConversionFactor = unit, k
	v.Result = raw * k
	text, rounded, err := m.Rounding.Round(v.Result)
	if err != nil {
		return Value{}, inputErr("rounding", "%v", err)
	}
	v.Text, v.Rounded = text, rounded
	rl, dl := m.ReportingLimit, m.DetectionLimit
	switch {
	case rl > 0 && v.Result < rl && (dl == 0 || v.Result < dl):
		v.Text, v.Rounded = "< "+strconv.FormatFloat(rl, 'g', -1, 64), 0
		v.Qualifiers = append(v.Qualifiers, q.BelowRL)
	case rl > 0 && v.Result < rl:
		v.Qualifiers = append(v.Qualifiers, q.Estimated)
	}
	if s.HighestStandard > 0 && s.X0 > s.HighestStandard {
		v.Qualifiers = append(v.Qualifiers, q.OverRange)
		v.Action = fmt.Sprintf("dilute and re-run: x̂0 %g %s lies above the highest standard %g %s", s.X0, s.X0Unit, s.HighestStandard, s.X0Unit)
	}
	if s.ISFailed {
		w := q.ISFailure
		if s.ISDetail != "" {
			w.Words += " (" + s.ISDetail + ")"
		}
		v.Qualifiers = append(v.Qualifiers, w)
	}
	return v, nil
}

func checkMethod(m *Method) (Qualifiers, error) {
	if err := ucum.Validate(m.Unit); err != nil {
		return Qualifiers{}, inputErr("method.unit", "%v", err)
	}
	if err := m.Rounding.normalise(); err != nil {
		return Qualifiers{}, inputErr("method.rounding", "%v", err)
	}
	for name, x := range map[string]float64{"reporting_limit": m.ReportingLimit, "detection_limit": m.DetectionLimit} {
		if math.IsNaN(x) || math.IsInf(x, 0) || x < 0 {
			return Qualifiers{}, inputErr("method."+name, "must be a finite number ≥ 0, got %v", x)
		}
	}
	if m.DetectionLimit > 0 && m.ReportingLimit > 0 && m.DetectionLimit > m.ReportingLimit {
		return Qualifiers{}, inputErr("method.detection_limit", "%v exceeds the reporting limit %v", m.DetectionLimit, m.ReportingLimit)
	}
	q, d := m.Qualifiers, DefaultQualifiers()
	for _, p := range [...]struct{ got, def *Qualifier }{{&q.BelowRL, &d.BelowRL}, {&q.Estimated, &d.Estimated}, {&q.OverRange, &d.OverRange}, {&q.ISFailure, &d.ISFailure}} {
		if *p.got == (Qualifier{}) {
			*p.got = *p.def
		}
	}
	return q, nil
}

func checkSample(s *Sample) error {
	for name, x := range map[string]float64{"x0": s.X0, "dilution": s.Dilution, "sample_amount": s.SampleAmount,
		"final_volume": s.FinalVolume, "dry_fraction": s.DryFraction, "highest_standard": s.HighestStandard} {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return inputErr(name, "must be finite, got %v", x)
		}
	}
	if err := ucum.Validate(s.X0Unit); err != nil {
		return inputErr("x0_unit", "%v", err)
	}
	if s.Dilution == 0 {
		s.Dilution = 1
	}
	if s.Dilution < 1 {
		return inputErr("dilution", "must be ≥ 1, got %v", s.Dilution)
	}
	if (s.SampleAmount == 0) != (s.FinalVolume == 0) {
		return inputErr("sample_amount", "sample amount and final volume go together: give both or neither")
	}
	if s.SampleAmount != 0 {
		if !(s.SampleAmount > 0) || !(s.FinalVolume > 0) {
			return inputErr("sample_amount", "sample amount and final volume must be > 0")
		}
		if err := ucum.Validate(s.SampleAmountUnit); err != nil {
			return inputErr("sample_amount_unit", "%v", err)
		}
		if err := ucum.Validate(s.FinalVolumeUnit); err != nil {
			return inputErr("final_volume_unit", "%v", err)
		}
	}
	if s.DryFraction == 0 {
		s.DryFraction = 1
	}
	if !(s.DryFraction > 0 && s.DryFraction <= 1) {
		return inputErr("dry_fraction", "must lie in (0, 1], got %v", s.DryFraction)
	}
	if s.HighestStandard < 0 {
		return inputErr("highest_standard", "must be ≥ 0, got %v", s.HighestStandard)
	}
	return nil
}
