package lab

import (
	"context"
	"fmt"
	"math"
	"strings"
	"time"

	"curvekeeper/calib"
)

// Kinds of standard material.
const (
	// MaterialReference is a certified reference material: a certificate
	// value with its expanded uncertainty and coverage factor, or a
	// tolerance.
	MaterialReference = "reference_material"
	// MaterialStock is a stock solution: certified like a reference
	// material, or prepared from one.
	MaterialStock = "stock_solution"
	// MaterialLevel is one calibration level prepared from a stock or a
	// reference material; it names its level.
	MaterialLevel = "calibration_level"
)

// StandardsPolicy is what a method says about the standard materials of its
// runs.
type StandardsPolicy struct {
	// ExpiredAdvisory makes CheckStandardsInDate advisory: an out-of-date
	// material is reported but does not fail the curve. Mandatory by
	// default.
	ExpiredAdvisory bool `json:"expired_advisory,omitempty"`
}

// ExpiredStandardsAdvisory reports whether the method makes
// CheckStandardsInDate advisory.
func (m *Method) ExpiredStandardsAdvisory() bool { return m.Standards.ExpiredAdvisory }

// MaterialKinds lists the kinds of standard material.
var MaterialKinds = []string{MaterialReference, MaterialStock, MaterialLevel}

// CheckStandardsInDate is the name of the check a curve carries when its
// run names the standard materials it used: every material, and every
// material it was prepared from, within its expiry at the run's
// acquisition time and, when prepared, prepared before its parent expired.
const CheckStandardsInDate = "standards_in_date"

// PrepStep is one preparation step of a material from its parent: an
// aliquot of the parent (mL) made up to a final volume (mL), each volume
// with its tolerance ± (mL, a rectangular distribution).
type PrepStep struct {
	AliquotML    float64 `json:"aliquot_ml"`
	AliquotTolML float64 `json:"aliquot_tol_ml"`
	FinalML      float64 `json:"final_ml"`
	FinalTolML   float64 `json:"final_tol_ml"`
}

// MaterialInput is a standard material as the lab records it. A material
// without PreparedFrom carries its certificate (Value, and Expanded with K
// or Tolerance); a prepared one carries its Preparation steps, and its
// value, unit and analyte follow from its parent.
type MaterialInput struct {
	Code         string
	Kind         string
	Analyte      string // inherited from the parent when prepared
	Unit         string // UCUM; inherited from the parent when prepared
	Value        float64
	Expanded     *float64 // certificate U
	K            *float64 // certificate coverage factor
	Tolerance    *float64 // certificate tolerance ± a (rectangular)
	Lot          string
	Supplier     string
	Level        string // the calibration level, for MaterialLevel
	ExpiresAt    time.Time
	PreparedFrom string
	PreparedAt   *time.Time
	Preparation  []PrepStep
}

// Material is a stored standard material.
type Material struct {
	MaterialInput
	// RelativeUncertainty is u(value)/value: the certificate's u = U/k or
	// a/√3, combined for a prepared material with its parent's and each
	// volume's a/(√3·V) in quadrature (product model, JCGM 100 §5.1.6;
	// Eurachem/CITAC QUAM App. E.1).
	RelativeUncertainty float64
	CreatedAt           time.Time
	CreatedBy           string
}

// MaterialStore is the persistence of standard materials.
type MaterialStore interface {
	// CreateMaterial stores m (KindConflict when its code is taken).
	CreateMaterial(ctx context.Context, m Material, actor string) (*Material, error)
	// MaterialLineage returns the materials codes name and every material
	// they were prepared from, by code; an unknown code is absent.
	MaterialLineage(ctx context.Context, codes []string) (map[string]*Material, error)
}

// DefineMaterial records a standard material on behalf of p: a prepared
// material takes its analyte, unit and value from its parent.
func (s *Service) DefineMaterial(ctx context.Context, p Principal, in MaterialInput) (*Material, error) {
	var parent *Material
	if in.PreparedFrom != "" {
		var err error
		parent, err = s.Reader.GetMaterial(ctx, in.PreparedFrom)
		if KindOf(err) == KindNotFound {
			return nil, FieldError("/prepared_from", "no standard material is called %q", in.PreparedFrom)
		}
		if err != nil {
			return nil, err
		}
	}
	m, err := PrepareMaterial(in, parent)
	if err != nil {
		return nil, err
	}
	return s.store.CreateMaterial(ctx, m, p.Actor())
}

// PrepareMaterial checks in against the rules and its parent (nil when in
// is not prepared) and returns the material with its value and relative
// standard uncertainty:
//
//	prepared value  c = c_parent · Π aliquot_j/final_j
//	u_rel(c)        = √(u_rel(parent)² + Σ_j [(a_aliq,j/(√3·V_aliq,j))² + (a_final,j/(√3·V_final,j))²])
//	certificate     u_rel = (U/k)/value, or (a/√3)/value for a tolerance ± a
//
// (JCGM 100 §5.1.6 for a product of factors; tolerances as rectangular
// distributions after Eurachem/CITAC QUAM App. E.1).
func PrepareMaterial(in MaterialInput, parent *Material) (Material, error) {
	in.Code, in.Analyte, in.Level = strings.TrimSpace(in.Code), strings.TrimSpace(in.Analyte), strings.TrimSpace(in.Level)
	switch {
	case in.Code == "" || len(in.Code) > MaxNameLen:
		return Material{}, FieldError("/code", "code must be 1 to %d characters", MaxNameLen)
	case !isMaterialKind(in.Kind):
		return Material{}, FieldError("/kind", "kind must be one of %s", strings.Join(MaterialKinds, ", "))
	case in.ExpiresAt.IsZero():
		return Material{}, FieldError("/expires_at", "expires_at is required")
	case len(in.Lot) > 200:
		return Material{}, FieldError("/lot", "lot must be at most 200 characters")
	case len(in.Supplier) > 200:
		return Material{}, FieldError("/supplier", "supplier must be at most 200 characters")
	case (in.Kind == MaterialLevel) != (in.Level != ""):
		return Material{}, FieldError("/level", "a calibration_level names its level, and only a calibration_level does")
	case len(in.Level) > MaxNameLen:
		return Material{}, FieldError("/level", "level must be 1 to %d characters", MaxNameLen)
	}
	if parent == nil {
		return certified(in)
	}
	return prepared(in, parent)
}

func isMaterialKind(k string) bool {
	for _, m := range MaterialKinds {
		if k == m {
			return true
		}
	}
	return false
}

func certified(in MaterialInput) (Material, error) {
	switch {
	case in.Kind == MaterialLevel:
		return Material{}, FieldError("/prepared_from", "a calibration_level is prepared from a stock or reference material")
	case len(in.Preparation) > 0:
		return Material{}, FieldError("/preparation", "preparation steps need prepared_from")
	case in.PreparedAt != nil:
		return Material{}, FieldError("/prepared_at", "prepared_at needs prepared_from")
	case in.Analyte == "" || len(in.Analyte) > MaxNameLen:
		return Material{}, FieldError("/analyte", "analyte must be 1 to %d characters", MaxNameLen)
	case strings.TrimSpace(in.Unit) == "":
		return Material{}, FieldError("/unit", "unit is required")
	case !calib.Finite(in.Value) || in.Value <= 0:
		return Material{}, FieldError("/value", "value must be a finite number > 0")
	case (in.Expanded == nil) != (in.K == nil):
		return Material{}, FieldError("/coverage_factor", "expanded_uncertainty and coverage_factor come together")
	case (in.Expanded == nil) == (in.Tolerance == nil):
		return Material{}, FieldError("/expanded_uncertainty", "a certificate states either expanded_uncertainty with coverage_factor, or tolerance")
	}
	var u float64
	if in.Expanded != nil {
		switch {
		case !calib.Finite(*in.Expanded) || *in.Expanded < 0:
			return Material{}, FieldError("/expanded_uncertainty", "expanded_uncertainty must be a finite number >= 0")
		case !calib.Finite(*in.K) || *in.K <= 0:
			return Material{}, FieldError("/coverage_factor", "coverage_factor must be a finite number > 0")
		}
		u = *in.Expanded / *in.K
	} else {
		if !calib.Finite(*in.Tolerance) || *in.Tolerance < 0 {
			return Material{}, FieldError("/tolerance", "tolerance must be a finite number >= 0")
		}
		u = *in.Tolerance / math.Sqrt(3)
	}
	return Material{MaterialInput: in, RelativeUncertainty: u / in.Value}, nil
}

func prepared(in MaterialInput, parent *Material) (Material, error) {
	switch {
	case in.Kind == MaterialReference:
		return Material{}, FieldError("/kind", "a reference_material is certified, not prepared")
	case in.Expanded != nil || in.K != nil || in.Tolerance != nil:
		return Material{}, FieldError("/expanded_uncertainty", "a prepared material's uncertainty follows from its parent and its preparation")
	case in.Value != 0:
		return Material{}, FieldError("/value", "a prepared material's value follows from its parent and its preparation")
	case in.Analyte != "" && in.Analyte != parent.Analyte:
		return Material{}, FieldError("/analyte", "the parent %s is of %s, not %s", parent.Code, parent.Analyte, in.Analyte)
	case in.Unit != "" && in.Unit != parent.Unit:
		return Material{}, FieldError("/unit", "the parent %s is in %s, not %s", parent.Code, parent.Unit, in.Unit)
	case len(in.Preparation) == 0:
		return Material{}, FieldError("/preparation", "a prepared material lists at least one preparation step")
	case len(in.Preparation) > 20:
		return Material{}, FieldError("/preparation", "at most 20 preparation steps")
	case parent.Kind == MaterialLevel:
		return Material{}, FieldError("/prepared_from", "%s is a calibration level; prepare from a stock or reference material", parent.Code)
	}
	value, rel2 := parent.Value, parent.RelativeUncertainty*parent.RelativeUncertainty
	for i, st := range in.Preparation {
		p := Pointer("preparation", i)
		for _, v := range []struct {
			name     string
			vol, tol float64
		}{{"aliquot", st.AliquotML, st.AliquotTolML}, {"final", st.FinalML, st.FinalTolML}} {
			if !calib.Finite(v.vol) || v.vol <= 0 {
				return Material{}, FieldError(p+"/"+v.name+"_ml", "%s volume must be a finite number > 0", v.name)
			}
			if !calib.Finite(v.tol) || v.tol < 0 || v.tol >= v.vol {
				return Material{}, FieldError(p+"/"+v.name+"_tol_ml", "%s tolerance must be >= 0 and below the volume", v.name)
			}
			r := v.tol / (math.Sqrt(3) * v.vol)
			rel2 += r * r
		}
		if st.AliquotML > st.FinalML {
			return Material{}, FieldError(p+"/aliquot_ml", "the aliquot (%v mL) exceeds the final volume (%v mL)", st.AliquotML, st.FinalML)
		}
		value *= st.AliquotML / st.FinalML
	}
	in.Analyte, in.Unit, in.Value = parent.Analyte, parent.Unit, value
	return Material{MaterialInput: in, RelativeUncertainty: math.Sqrt(rel2)}, nil
}

// standardsCheck judges the materials a run used for one analyte (codes,
// with their lineage) at the run's acquisition time at: a material whose
// expiry is at or before at, or one prepared at or after its parent's
// expiry, fails the check. The check is mandatory unless advisory.
func standardsCheck(codes []string, lineage map[string]*Material, at time.Time, advisory bool) calib.Check {
	var problems []string
	seen := map[string]bool{}
	for _, c := range codes {
		for m := lineage[c]; m != nil && !seen[m.Code]; {
			seen[m.Code] = true
			if !m.ExpiresAt.After(at) {
				problems = append(problems, fmt.Sprintf("%s (%s, lot %q) expired %s", m.Code, m.Kind, m.Lot, m.ExpiresAt.UTC().Format(time.RFC3339)))
			}
			parent := lineage[m.PreparedFrom]
			if parent != nil && m.PreparedAt != nil && !parent.ExpiresAt.After(*m.PreparedAt) {
				problems = append(problems, fmt.Sprintf("%s was prepared %s from %s, which expired %s", m.Code,
					m.PreparedAt.UTC().Format(time.RFC3339), parent.Code, parent.ExpiresAt.UTC().Format(time.RFC3339)))
			}
			m = parent
		}
	}
	ch := calib.Check{Name: CheckStandardsInDate, Statistic: float64(len(problems)), Limit: 0, Computed: true,
		Passed: len(problems) == 0, Mandatory: !advisory,
		Source: "ISO/IEC 17025:2017 §6.4.5, §6.6: reference materials used within their stated validity"}
	if len(problems) == 0 {
		ch.Detail = fmt.Sprintf("Every standard material used (%d with their stocks) was within its expiry at the run's acquisition time.", len(seen))
	} else {
		ch.Detail = "Out of date at the run's acquisition time: " + strings.Join(problems, "; ") + "."
	}
	return ch
}

// addStandardsChecks adds CheckStandardsInDate to every curve of a run
// whose analyte a named material is of. Every code must name a known
// material of an analyte the run calibrates (else a field error).
func addStandardsChecks(m *Method, in *RunInput, lineage map[string]*Material, curves []CurveInput) error {
	byAnalyte := map[string][]string{}
	for i, code := range in.Materials {
		mat := lineage[code]
		if mat == nil {
			return FieldError(Pointer("standard_materials", i), "no standard material is called %q", code)
		}
		found := false
		for _, c := range curves {
			found = found || c.Analyte == mat.Analyte
		}
		if !found {
			return FieldError(Pointer("standard_materials", i), "%s is a standard of %s, which the run does not calibrate", code, mat.Analyte)
		}
		byAnalyte[mat.Analyte] = append(byAnalyte[mat.Analyte], code)
	}
	advisory := m.ExpiredStandardsAdvisory()
	for i, c := range curves {
		codes := byAnalyte[c.Analyte]
		if len(codes) == 0 {
			continue
		}
		curves[i].Standards = StandardsTermOf(c.Analyte, codes, lineage)
		ch := standardsCheck(codes, lineage, in.AcquiredAt, advisory)
		r := c.Report
		r.Checks = append(r.Checks, ch)
		if ch.Mandatory && !ch.Passed {
			r.Verdict = VerdictFail
		}
	}
	return nil
}

// MaxRunMaterials bounds the standard materials one run may name.
const MaxRunMaterials = 50

// checkMaterialCodes refuses an empty, too long or repeated code.
func checkMaterialCodes(codes []string) error {
	if len(codes) > MaxRunMaterials {
		return FieldError("/standard_materials", "a run names at most %d standard materials", MaxRunMaterials)
	}
	seen := map[string]bool{}
	for i, c := range codes {
		if strings.TrimSpace(c) == "" || len(c) > MaxNameLen {
			return FieldError(Pointer("standard_materials", i), "a material code is 1 to %d characters", MaxNameLen)
		}
		if seen[c] {
			return FieldError(Pointer("standard_materials", i), "%q is named twice", c)
		}
		seen[c] = true
	}
	return nil
}
