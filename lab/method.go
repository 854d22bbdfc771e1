package lab

import (
	"errors"
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
	// Model, when set, fits this analyte with another model than the
	// method's (for instance calib.AverageRF); "" takes the method's.
	Model calib.Model `json:"model,omitempty"`
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
	// Curve seeds or holds coefficients of a non-linear model by name
	// (calib.CurveParameters); empty for the least-squares models.
	Curve calib.CurveParameters
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
	Curve       calib.CurveParameters // see MethodInput.Curve
	CreatedAt   time.Time
	CreatedBy   string
}

// Options returns the engine options this method revision fits with.
func (m *Method) Options() calib.Options {
	return calib.Options{Model: m.Model, Weighting: m.Weighting, Confidence: m.Confidence, Policy: m.Acceptance, Weights: m.Weights, Curve: m.Curve}
}

// OptionsFor returns the engine options analyte name is fitted with: the
// method's, with the analyte's own model when it names one.
func (m *Method) OptionsFor(name string) calib.Options {
	o := m.Options()
	if a, ok := m.Analyte(name); ok && a.Model != "" {
		o.Model = a.Model
	}
	return o
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
	models     = append([]calib.Model{calib.Linear, calib.LinearOrigin, calib.Quadratic, calib.AverageRF}, calib.CurveModels()...)
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
	if err := checkModelWeighting("/model", in.Model, in.Weighting); err != nil {
		return err
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
		if a.Model != "" {
			if err := checkModelWeighting(fmt.Sprintf("/analytes/%d/model", i), a.Model, in.Weighting); err != nil {
				return err
			}
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
	if err := in.Curve.Check(in.Model); err != nil {
		var ie *calib.InputError
		if errors.As(err, &ie) {
			return FieldError("/curve_parameters"+strings.ReplaceAll(strings.TrimPrefix(ie.Field, "options.curve"), ".", "/"), "%s", ie.Reason)
		}
		return err
	}
	v := reflect.ValueOf(in.Acceptance)
	for i := 0; i < v.NumField(); i++ {
		if f := v.Field(i); f.Kind() == reflect.Float64 && (math.IsNaN(f.Float()) || math.IsInf(f.Float(), 0)) {
			return FieldError("/acceptance", "%s must be a finite number", v.Type().Field(i).Name)
		}
	}
	return nil
}

// checkModelWeighting refuses an unknown model, or a weighting the model
// does not take; p points at the model. The average RF model weights by
// 1/x² whatever the method names (its mean RF is that line's slope).
func checkModelWeighting(p string, model calib.Model, w calib.Weighting) error {
	if !slices.Contains(models, model) {
		return FieldError(p, "unknown model %q", model)
	}
	if calib.IsCurveModel(model) {
		if !slices.Contains(calib.CurveWeightings(), w) {
			return FieldError("/weighting", "the non-linear model %s takes the weighting none, 1/y^2, 1/s^2 or power_of_mean, not %q", model, w)
		}
	} else if !slices.Contains(weightings, w) {
		return FieldError("/weighting", "unknown weighting %q", w)
	}
	return nil
}
