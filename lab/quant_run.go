package lab

import (
	"context"
	"encoding/json"
	"fmt"

	"curvekeeper/calib"
	"curvekeeper/lab/ucum"
)

// isRatios returns the responses a curve of analyte a is fitted on, or a
// sample of it quantified with: A_x/A_is when the method names an internal
// standard (every reading then needs its IS response), the responses as
// given otherwise (where IS responses are refused). p points at the IS
// responses.
func isRatios(a Analyte, responses, is []float64, p string) ([]float64, error) {
	if a.Quant.InternalStandard == "" {
		if len(is) > 0 {
			return nil, FieldError(p, "the method names no internal standard for %s", a.Name)
		}
		return responses, nil
	}
	if len(is) != len(responses) {
		return nil, FieldError(p, "%s is quantified against the internal standard %s: give one IS response per response (%d responses, %d IS responses)",
			a.Name, a.Quant.InternalStandard, len(responses), len(is))
	}
	r, err := calib.ResponseRatios(responses, is)
	if err != nil {
		return nil, FieldError(p, "%v", err)
	}
	return r, nil
}

// QuantResponses returns the responses sample s is quantified with against
// curve c: the response ratios with an internal standard.
func QuantResponses(c *CurveInput, s *Sample) []float64 {
	r, err := isRatios(c.Rules, s.Responses, s.ISResponses, "")
	if err != nil {
		return s.Responses // Ingest refused such a sample before
	}
	return r
}

// ReportedValue is the stored reported value of a result (JSON in
// sample_results.reported).
type ReportedValue struct {
	X0               float64     `json:"x0"`
	X0Unit           string      `json:"x0_unit"`
	Factors          []Factor    `json:"factors"`
	ComputedUnit     string      `json:"computed_unit"`
	ConversionFactor float64     `json:"conversion_factor"`
	Result           float64     `json:"result"`
	Unit             string      `json:"unit"`
	Rounded          float64     `json:"rounded"`
	Text             string      `json:"text"`
	Rule             string      `json:"rule"`
	ReportingLimit   float64     `json:"reporting_limit"`
	DetectionLimit   float64     `json:"detection_limit"`
	Qualifiers       []Qualifier `json:"qualifiers"`
	Action           string      `json:"action,omitempty"`
	Error            string      `json:"error,omitempty"` // why no value could be reported
	Cautions         []string    `json:"cautions"`
}

// Factor is one factor applied to x̂0.
type Factor struct {
	Name  string  `json:"name"`
	Value float64 `json:"value"`
	Unit  string  `json:"unit"`
	Op    string  `json:"op"`
}

// ISRecord is the stored internal-standard check of a result (JSON in
// sample_results.is_check).
type ISRecord struct {
	InternalStandard string  `json:"internal_standard"`
	Response         float64 `json:"response"`
	CalibratorMean   float64 `json:"calibrator_mean"`
	RecoveryPct      float64 `json:"recovery_pct"`
	LowPct           float64 `json:"low_pct"`
	HighPct          float64 `json:"high_pct"`
	Passed           bool    `json:"passed"`
	Detail           string  `json:"detail"`
	Source           string  `json:"source"`
}

// SampleOutcome is what a result of sample s against curve c adds to its
// quantity: the IS check, the reported value (JSON, nil when the analyte
// has neither), and, when the IS check failed, the withheld state's reason.
type SampleOutcome struct {
	Reported, ISCheck []byte
	Withheld          string
}

// Outcome judges sample s against curve c with quantity q.
func Outcome(c *CurveInput, s *Sample, q *Quantity) (SampleOutcome, error) {
	var out SampleOutcome
	var is ISOutcome
	if c.Rules.Quant.InternalStandard != "" && len(s.ISResponses) > 0 {
		var err error
		if is, err = CheckIS(c.Rules.Quant, c.CalibratorIS, s.ISResponses); err != nil {
			return out, fmt.Errorf("lab: IS check of %s: %w", s.ID, err)
		}
		var mean float64
		for _, v := range c.CalibratorIS {
			mean += v / float64(len(c.CalibratorIS))
		}
		rec := ISRecord{InternalStandard: c.Rules.Quant.InternalStandard, Response: is.Response, CalibratorMean: mean,
			RecoveryPct: is.RecoveryPct, LowPct: is.LowPct, HighPct: is.HighPct, Passed: is.Passed, Detail: is.Detail, Source: calib.ISWindowSource}
		if out.ISCheck, err = json.Marshal(rec); err != nil {
			return out, err
		}
		if !is.Passed {
			q.Flags = append(q.Flags, FlagISOutsideWindow)
			out.Withheld = fmt.Sprintf("internal standard %s recovered %.1f %% of the calibrators' mean response, outside the method's window %g–%g %%: the result is suspect and withheld",
				c.Rules.Quant.InternalStandard, is.RecoveryPct, is.LowPct, is.HighPct)
		}
	}
	if c.Rules.Quant == (Quant{}) || q.Conc == nil {
		return out, nil
	}
	rv := ReportedValue{X0: *q.Conc, X0Unit: c.Unit, Factors: []Factor{}, Qualifiers: []Qualifier{}}
	v, err := Report(c.Rules, *q.Conc, s.Dilution, s.Prep, c.Highest, is)
	if err != nil {
		rv.Error, rv.Cautions = err.Error(), calib.Cautions()
	} else {
		rv = ReportedValue{X0: v.X0, X0Unit: v.X0Unit, ComputedUnit: v.ComputedUnit,
			ConversionFactor: v.ConversionFactor, Result: v.Result, Unit: v.Unit, Rounded: v.Rounded, Text: v.Text, Rule: v.Rule,
			ReportingLimit: v.ReportingLimit, DetectionLimit: v.DetectionLimit, Action: v.Action, Cautions: v.Cautions,
			Factors: []Factor{}, Qualifiers: []Qualifier{}}
		for _, f := range v.Factors {
			rv.Factors = append(rv.Factors, Factor{f.Name, f.Value, f.Unit, f.Op})
		}
		for _, ql := range v.Qualifiers {
			rv.Qualifiers = append(rv.Qualifiers, Qualifier{ql.Code, ql.Words})
		}
	}
	out.Reported, err = json.Marshal(rv)
	return out, err
}

// refuseLateISSamples refuses samples posted after their run for an analyte
// quantified against an internal standard: the run's calibrator IS
// responses are not kept beside its curves yet, so such samples are posted
// with their run. It returns the run and its method revision.
func (s *Service) refuseLateISSamples(ctx context.Context, runID string, samples []Sample) (*Run, *Method, error) {
	run, err := s.GetRun(ctx, runID)
	if err != nil {
		return nil, nil, err
	}
	m, err := s.GetMethodRevision(ctx, run.Method, run.MethodRevision)
	if err != nil {
		return nil, nil, err
	}
	for i, sm := range samples {
		if a, ok := m.Analyte(sm.Analyte); ok && a.Quant.InternalStandard != "" {
			return nil, nil, FieldError(Pointer("samples", i, "analyte"), "%s is quantified against the internal standard %s: post its samples with their run", a.Name, a.Quant.InternalStandard)
		}
	}
	return run, m, nil
}

// checkPrep refuses a sample preparation that cannot make a reported value;
// p points at the sample.
func checkPrep(pr Prep, p string) error {
	if (pr.SampleAmount == 0) != (pr.FinalVolume == 0) {
		return FieldError(p+"/sample_amount", "sample amount and final volume go together: give both or neither")
	}
	for name, u := range map[string]string{"sample_amount_unit": pr.SampleAmountUnit, "final_volume_unit": pr.FinalVolumeUnit} {
		if u == "" && pr.SampleAmount == 0 {
			continue
		}
		if err := ucum.Validate(u); err != nil {
			return FieldError(p+"/"+name, "unit %q is not a UCUM unit this service knows: %v", u, err)
		}
	}
	if !calib.Finite(pr.DryFraction) || pr.DryFraction < 0 || pr.DryFraction > 1 {
		return FieldError(p+"/dry_fraction", "dry fraction must lie in (0, 1]")
	}
	return nil
}
