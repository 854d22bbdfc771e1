package lab

import (
	"fmt"
	"math"
	"strings"

	"curvekeeper/calib"
	"curvekeeper/lab/reported"
	"curvekeeper/lab/sequence"
	"curvekeeper/lab/ucum"
)

// Quant is an analyte's internal standard and reporting rules. Every field
// is optional: without an internal standard the curve is fitted on the
// analyte's response; without a reporting unit a result is reported in the
// analyte's unit.
type Quant struct {
	// InternalStandard names the analyte's internal standard. With one, the
	// run's standards and samples carry its response beside the analyte's
	// and the curve is fitted on the response ratio A_x/A_is against the
	// analyte's concentration (FIELD-NOTES §8, US EPA SW-846 8000 §11.4.3).
	InternalStandard string `json:"internal_standard,omitempty"`
	// ISWindowLowPct and ISWindowHighPct bound a sample's IS response as a
	// percentage of the calibrators' mean IS response; both zero: 60–125 %
	// (common ICP-MS practice, from memory; calib.ISWindowSource).
	ISWindowLowPct  float64 `json:"is_window_low_pct,omitzero"`
	ISWindowHighPct float64 `json:"is_window_high_pct,omitzero"`

	ReportingUnit  string  `json:"reporting_unit,omitempty"` // UCUM; "": the analyte's unit
	ReportingLimit float64 `json:"reporting_limit,omitzero"` // in the reporting unit; 0: none
	DetectionLimit float64 `json:"detection_limit,omitzero"` // in the reporting unit; 0: none
	// SignificantFigures (0: 3) or, with UseDecimals, Decimals.
	SignificantFigures int          `json:"significant_figures,omitzero"`
	Decimals           int          `json:"decimals,omitzero"`
	UseDecimals        bool         `json:"use_decimals,omitzero"`
	Qualifiers         QualifierSet `json:"qualifiers,omitzero"`

	// BlankLimitFractionOfLLOQ: a blank of the run's sequence judged here
	// (calibration blank, method blank, CCB) passes when |x̂0| ≤ this
	// fraction of the LLOQ, the curve's lowest non-zero standard; 0: when
	// |x̂0| ≤ the reporting limit (converted to the analyte's unit).
	BlankLimitFractionOfLLOQ float64 `json:"blank_limit_fraction_of_lloq,omitzero"`
	// BlankSubtraction is what is subtracted from each sample's x̂0 in the
	// sequence's record: "" or "none", or "mean_method_blank" (the mean x̂0
	// of the batch's method blanks).
	BlankSubtraction string `json:"blank_subtraction,omitempty"`
}

// QualifierSet is a method's qualifier codes and words; an empty entry takes
// reported.DefaultQualifiers' entry.
type QualifierSet struct {
	BelowRL   Qualifier `json:"below_rl,omitzero"`
	Estimated Qualifier `json:"estimated,omitzero"`
	OverRange Qualifier `json:"over_range,omitzero"`
	ISFailure Qualifier `json:"is_failure,omitzero"`
}

// Qualifier is a code printed beside a result and its words.
type Qualifier struct {
	Code  string `json:"code"`
	Words string `json:"words"`
}

// ISWindow returns the analyte's internal-standard window, defaults filled.
func (q Quant) ISWindow() calib.ISWindow {
	if q.ISWindowLowPct == 0 && q.ISWindowHighPct == 0 {
		return calib.ISWindow{LowPct: calib.DefaultISWindowLowPct, HighPct: calib.DefaultISWindowHighPct}
	}
	return calib.ISWindow{LowPct: q.ISWindowLowPct, HighPct: q.ISWindowHighPct}
}

// Rounding returns the reporting rule of reported.Report.
func (q Quant) Rounding() reported.Rounding {
	return reported.Rounding{SignificantFigures: q.SignificantFigures, Decimals: q.Decimals, UseDecimals: q.UseDecimals}
}

// QualifiersFilled returns the analyte's qualifiers, defaults filled.
func (q Quant) QualifiersFilled() reported.Qualifiers {
	d := reported.DefaultQualifiers()
	pick := func(got Qualifier, def reported.Qualifier) reported.Qualifier {
		if got == (Qualifier{}) {
			return def
		}
		return reported.Qualifier{Code: got.Code, Words: got.Words}
	}
	s := q.Qualifiers
	return reported.Qualifiers{BelowRL: pick(s.BelowRL, d.BelowRL), Estimated: pick(s.Estimated, d.Estimated),
		OverRange: pick(s.OverRange, d.OverRange), ISFailure: pick(s.ISFailure, d.ISFailure)}
}

// checkAnalyteQuant refuses analyte i's unit when UCUM (as lab/ucum knows
// it) does not, and its Quant when a rule breaks, naming the field.
func checkAnalyteQuant(i int, a Analyte) error {
	p := fmt.Sprintf("/analytes/%d", i)
	if err := ucum.Validate(a.Unit); err != nil {
		return FieldError(p+"/unit", "unit %q is not a UCUM unit this service knows: %v", a.Unit, err)
	}
	q := a.Quant
	if q.InternalStandard != strings.TrimSpace(q.InternalStandard) || len(q.InternalStandard) > MaxNameLen {
		return FieldError(p+"/internal_standard", "internal standard must be 1 to %d characters without surrounding spaces", MaxNameLen)
	}
	for name, v := range map[string]float64{"is_window_low_pct": q.ISWindowLowPct, "is_window_high_pct": q.ISWindowHighPct,
		"reporting_limit": q.ReportingLimit, "detection_limit": q.DetectionLimit} {
		if !calib.Finite(v) || v < 0 {
			return FieldError(p+"/"+name, "%s must be a finite number ≥ 0", name)
		}
	}
	if (q.ISWindowLowPct != 0 || q.ISWindowHighPct != 0) && !(q.ISWindowLowPct < q.ISWindowHighPct) {
		return FieldError(p+"/is_window_high_pct", "the IS window needs low < high, got %g–%g %%", q.ISWindowLowPct, q.ISWindowHighPct)
	}
	if q.ReportingUnit != "" {
		if err := ucum.Validate(q.ReportingUnit); err != nil {
			return FieldError(p+"/reporting_unit", "reporting unit %q is not a UCUM unit this service knows: %v", q.ReportingUnit, err)
		}
	}
	if q.DetectionLimit > 0 && q.ReportingLimit > 0 && q.DetectionLimit > q.ReportingLimit {
		return FieldError(p+"/detection_limit", "detection limit %g exceeds the reporting limit %g", q.DetectionLimit, q.ReportingLimit)
	}
	if !calib.Finite(q.BlankLimitFractionOfLLOQ) || q.BlankLimitFractionOfLLOQ < 0 || q.BlankLimitFractionOfLLOQ > 10 {
		return FieldError(p+"/blank_limit_fraction_of_lloq", "the blank limit must be a fraction of the LLOQ from 0 to 10")
	}
	switch q.BlankSubtraction {
	case "", string(sequence.SubtractNone), string(sequence.SubtractMeanMethodBlank):
	default:
		return FieldError(p+"/blank_subtraction", "blank subtraction must be none or mean_method_blank, got %q", q.BlankSubtraction)
	}
	if q.SignificantFigures < 0 || q.SignificantFigures > 15 {
		return FieldError(p+"/significant_figures", "significant figures must be 1 to 15")
	}
	if q.Decimals < 0 || q.Decimals > 10 {
		return FieldError(p+"/decimals", "decimals must be 0 to 10")
	}
	return nil
}

// Prep is a sample's preparation: what reported.Report multiplies x̂0 by
// beside the dilution. Zero fields: as measured.
type Prep struct {
	SampleAmount     float64 `json:"sample_amount,omitzero"`
	SampleAmountUnit string  `json:"sample_amount_unit,omitempty"`
	FinalVolume      float64 `json:"final_volume,omitzero"`
	FinalVolumeUnit  string  `json:"final_volume_unit,omitempty"`
	DryFraction      float64 `json:"dry_fraction,omitzero"`
}

// ISOutcome is a sample's internal-standard check.
type ISOutcome struct {
	Checked     bool
	Response    float64 // mean IS response of the sample's readings
	RecoveryPct float64
	LowPct      float64
	HighPct     float64
	Passed      bool
	Detail      string
}

// FlagISOutsideWindow marks a result whose internal-standard recovery lies
// outside the method's window; such a result is withheld.
const FlagISOutsideWindow = "is_outside_window"

// CheckIS judges a sample's IS response (the mean of its readings) against
// the mean IS response of the calibrators (calib.ISRecovery).
func CheckIS(q Quant, calibratorIS, sampleIS []float64) (ISOutcome, error) {
	if len(sampleIS) == 0 || len(calibratorIS) == 0 {
		return ISOutcome{}, nil
	}
	var m float64
	for _, v := range sampleIS {
		m += v
	}
	m /= float64(len(sampleIS))
	checks, _, err := calib.ISRecovery(calibratorIS, []float64{m}, q.ISWindow())
	if err != nil {
		return ISOutcome{}, err
	}
	c := checks[0]
	return ISOutcome{Checked: true, Response: m, RecoveryPct: c.RecoveryPct, LowPct: c.LowPct, HighPct: c.HighPct,
		Passed: c.Passed, Detail: c.Detail}, nil
}

// Report computes the reported value of a result of analyte a: x̂0 (in the
// analyte's unit, already multiplied by the dilution), the sample's
// preparation, the analyte's reporting rules, the highest calibration
// standard (0: not checked) and the IS outcome.
func Report(a Analyte, x0, dilution float64, prep Prep, highest float64, is ISOutcome) (reported.Value, error) {
	q := a.Quant
	unit := q.ReportingUnit
	if unit == "" {
		unit = a.Unit
	}
	if math.IsNaN(dilution) || dilution <= 0 {
		dilution = 1
	}
	// reported.Report applies the dilution itself and checks the
	// over-range against the undiluted x̂0.
	s := reported.Sample{X0: x0 / dilution, X0Unit: a.Unit, Dilution: max(dilution, 1),
		SampleAmount: prep.SampleAmount, SampleAmountUnit: prep.SampleAmountUnit,
		FinalVolume: prep.FinalVolume, FinalVolumeUnit: prep.FinalVolumeUnit, DryFraction: prep.DryFraction,
		HighestStandard: highest, ISFailed: is.Checked && !is.Passed, ISDetail: is.Detail}
	if dilution < 1 {
		s.X0, s.Dilution = x0, 1
	}
	return reported.Report(s, reported.Method{Unit: unit, Rounding: q.Rounding(), ReportingLimit: q.ReportingLimit,
		DetectionLimit: q.DetectionLimit, Qualifiers: q.QualifiersFilled()})
}
