package lab

import (
	"fmt"
	"math"
	"reflect"
	"slices"
	"strings"
	"time"

	"curvekeeper/calib"
)

// Analyte is one analyte a method measures, with its unit (a UCUM code).
type Analyte struct {
	Name string `json:"name"`
	Unit string `json:"unit"`
	// Quant is the analyte's internal standard and reporting rules
	// (lab/quant.go); zero for an external-standard analyte reported as
	// x̂0.
	Quant Quant `json:"quant,omitzero"`
	// Uncertainty is how the analyte's results state their uncertainty
	// budget and conformity (lab/budget.go); nil: no budget.
	Uncertainty *UncertaintySpec `json:"uncertainty,omitempty"`
}

// MethodInput is a method as an administrator defines it. Acceptance must be
// complete: the api fills every threshold the request leaves out from
// calib.DefaultPolicy() before calling CreateMethod.
type MethodInput struct {
	Name       string
	Model      calib.Model
	Weighting  calib.Weighting
	Confidence float64 // two-sided, in (0, 1)
	Analytes   []Analyte
	Acceptance calib.Policy
	QC         QCPolicy // zero fields take DefaultQCPolicy's values
	// Weights configures weighting and the σ of LOD/LOQ; zero fields take
	// calib.DefaultWeightOptions' values.
	Weights calib.WeightOptions
	// Description is the administrator's free text about the method.
	Description string
	// Standards: whether an out-of-date standard material fails a curve.
	Standards StandardsPolicy
}

// Method is one stored revision of a method.
type Method struct {
	Name        string
	Revision    int
	Model       calib.Model
	Weighting   calib.Weighting
	Confidence  float64
	Analytes    []Analyte
	Acceptance  calib.Policy
	QC          QCPolicy
	Weights     calib.WeightOptions // every field filled
	Description string
	Standards   StandardsPolicy
	CreatedAt   time.Time
	CreatedBy   string
}

// Options returns the engine options this method revision fits with.
func (m *Method) Options() calib.Options {
	return calib.Options{Model: m.Model, Weighting: m.Weighting, Confidence: m.Confidence, Policy: m.Acceptance, Weights: m.Weights}
}

// Analyte returns the method's analyte called name.
func (m *Method) Analyte(name string) (Analyte, bool) {
	for _, a := range m.Analytes {
		if a.Name == name {
			return a, true
		}
	}
	return Analyte{}, false
}

var (
	models     = append([]calib.Model{calib.Linear, calib.LinearOrigin, calib.Quadratic}, calib.CurveModels()...)
	weightings = calib.Weightings()
)

// WeightOptionsWithDefaults fills the zero fields of o from
// calib.DefaultWeightOptions (revisions stored before the options existed
// read '{}').
func WeightOptionsWithDefaults(o calib.WeightOptions) calib.WeightOptions {
	d := calib.DefaultWeightOptions()
	if o.MinReplicates == 0 {
		o.MinReplicates = d.MinReplicates
	}
	if o.LimitSigma == "" {
		o.LimitSigma = d.LimitSigma
	}
	return o
}

// CheckMethod refuses a method definition that breaks a rule, naming the field.
func CheckMethod(in MethodInput) error {
	if strings.TrimSpace(in.Name) == "" || len(in.Name) > MaxNameLen {
		return FieldError("/name", "name must be 1 to %d characters", MaxNameLen)
	}
	if !slices.Contains(models, in.Model) {
		return FieldError("/model", "unknown model %q", in.Model)
	}
	if calib.IsCurveModel(in.Model) {
		if !slices.Contains(calib.CurveWeightings(), in.Weighting) {
			return FieldError("/weighting", "the non-linear model %s takes the weighting none, 1/y^2, 1/s^2 or power_of_mean, not %q", in.Model, in.Weighting)
		}
	} else if !slices.Contains(weightings, in.Weighting) {
		return FieldError("/weighting", "unknown weighting %q", in.Weighting)
	}
	if !(in.Confidence > 0 && in.Confidence < 1) {
		return FieldError("/confidence", "confidence must be between 0 and 1, exclusive")
	}
	if len(in.Analytes) == 0 {
		return FieldError("/analytes", "at least one analyte is required")
	}
	seen := map[string]bool{}
	for i, a := range in.Analytes {
		if strings.TrimSpace(a.Name) == "" {
			return FieldError(fmt.Sprintf("/analytes/%d/name", i), "analyte name is required")
		}
		if strings.TrimSpace(a.Unit) == "" {
			return FieldError(fmt.Sprintf("/analytes/%d/unit", i), "unit is required")
		}
		if seen[a.Name] {
			return FieldError(fmt.Sprintf("/analytes/%d/name", i), "analyte %q is listed twice", a.Name)
		}
		seen[a.Name] = true
		if err := checkAnalyteQuant(i, a); err != nil {
			return err
		}
		if err := checkUncertaintySpec(fmt.Sprintf("/analytes/%d/uncertainty", i), a.Uncertainty); err != nil {
			return err
		}
	}
	if err := in.QC.Check(); err != nil {
		return err
	}
	if in.Weights.MinReplicates < 2 || in.Weights.MinReplicates > 1000 {
		return FieldError("/weighting_options/min_replicates", "min_replicates must be 2 to 1000, got %d", in.Weights.MinReplicates)
	}
	if !slices.Contains(calib.SigmaBases(), in.Weights.LimitSigma) {
		return FieldError("/weighting_options/limit_sigma", "unknown σ basis %q", in.Weights.LimitSigma)
	}
	v := reflect.ValueOf(in.Acceptance)
	for i := 0; i < v.NumField(); i++ {
		if f := v.Field(i); f.Kind() == reflect.Float64 && (math.IsNaN(f.Float()) || math.IsInf(f.Float(), 0)) {
			return FieldError("/acceptance", "%s must be a finite number", v.Type().Field(i).Name)
		}
	}
	return nil
}
