package lab

import (
	"context"
	"fmt"
	"math"
	"strings"
	"time"

	"curvekeeper/calib"
)

// Sources of a method's top-down estimate (UncertaintySpec.TopDownSource).
const (
	TopDownSourceStated  = "stated"  // the spec's top_down_relative (the default)
	TopDownSourceHistory = "history" // computed from the stored QC history when a result is computed
)

// DefaultTopDownWindow is how far back from now the history reaches when
// no period is given: a year, so that the data span the lab's usual
// variation (days, analysts, curves, lots).
const DefaultTopDownWindow = 365 * 24 * time.Hour

// The fewest data a top-down estimate is computed from (fewer: refused) and
// the numbers below which it carries a caution. The minima of the caution
// are common practice, recalled from memory: control limits are set from
// at least 20 control values (Nordtest TR 569's control charts), and a bias
// from a single reference-material result says little; the lab's SOP sets
// its own.
const (
	MinTopDownRecoveries     = 2
	MinTopDownCRM            = 1
	AdvisedTopDownRecoveries = 20
	AdvisedTopDownCRM        = 3
)

// TopDownPoint is one stored verification as the top-down history reads
// it: a recovery found/nominal and, when the standard was a reference
// material, its certificate's relative standard uncertainty.
type TopDownPoint struct {
	VerificationID string
	CurveID        string
	Kind           string
	Level          string
	At             time.Time
	Concentration  float64 // nominal (the certificate value for a reference material)
	Found          float64
	RecoveryPct    float64
	Passed         bool
	Material       string  // "" when the standard is no reference material
	MaterialRelU   float64 // u(Cref)/Cref of Material's certificate
}

// TopDownHistory is what the store reads for a TopDownQuery: the
// verifications with a recovery, by time, and how many gave none.
type TopDownHistory struct {
	Points []TopDownPoint
	Unread int
}

// TopDownQuery selects the history of a method's analyte: the
// verifications of its current curves measured in [From, To).
type TopDownQuery struct {
	Method, Analyte string
	From, To        time.Time
}

// TopDownEstimate is a method's top-down relative uncertainty of an
// analyte's results computed from the stored QC history, with the data it
// used.
type TopDownEstimate struct {
	Method, Analyte, Unit string
	From, To              time.Time
	// Estimate is calib.ComputeTopDown's answer on QC and CRM.
	Estimate calib.TopDown
	// QC are the recoveries (within-lab reproducibility), CRM the
	// reference-material results among them (bias); both by time.
	QC, CRM []TopDownPoint
	// Unread counts the verifications in the period that gave no
	// concentration (no root on their curve), so no recovery.
	Unread int
	// Notes say when the data fall short of the common-practice minima.
	Notes []string
}

// CheckVerificationMaterial checks that material m may be named by a
// verification of concentration conc measured at at against a curve of
// analyte and unit: a reference material of that analyte and unit whose
// certificate value is conc, and it and every material it was prepared
// from (lineage) in date at at. Its errors point at /material or
// /concentration.
func CheckVerificationMaterial(m *Material, lineage map[string]*Material, analyte, unit string, conc float64, at time.Time) error {
	switch {
	case m.Kind != MaterialReference:
		return FieldError("/material", "%s is a %s; a verification names a reference_material (its certificate gives the bias)", m.Code, m.Kind)
	case m.Analyte != analyte:
		return FieldError("/material", "%s is certified for %s, not for the curve's analyte %s", m.Code, m.Analyte, analyte)
	case m.Unit != unit:
		return FieldError("/material", "%s is certified in %s, not in the curve's unit %s", m.Code, m.Unit, unit)
	case math.Abs(conc-m.Value) > 1e-9*m.Value:
		return FieldError("/concentration", "a verification of %s is measured at its certificate value %v %s, not %v", m.Code, m.Value, m.Unit, conc)
	}
	for cur, seen := m, 0; cur != nil && seen < 32; seen++ {
		if at.After(cur.ExpiresAt) {
			what := cur.Code
			if cur != m {
				what = m.Code + "'s parent " + cur.Code
			}
			return FieldError("/material", "%s expired at %s, before the verification was measured (%s)", what,
				cur.ExpiresAt.UTC().Format(time.RFC3339), at.UTC().Format(time.RFC3339))
		}
		if cur.PreparedFrom == "" {
			break
		}
		cur = lineage[cur.PreparedFrom]
	}
	return nil
}

// checkVerificationMaterial reads the material in names and the curve's
// analyte and unit and applies CheckVerificationMaterial.
func (s *Service) checkVerificationMaterial(ctx context.Context, in VerificationInput) error {
	if strings.TrimSpace(in.Material) == "" {
		return FieldError("/material", "material is a standard material's code, not blank")
	}
	lineage, err := s.store.MaterialLineage(ctx, []string{in.Material})
	if err != nil {
		return err
	}
	m := lineage[in.Material]
	if m == nil {
		return FieldError("/material", "no standard material is called %q", in.Material)
	}
	c, err := s.GetCurve(ctx, in.CurveID)
	if err != nil {
		return err
	}
	return CheckVerificationMaterial(m, lineage, c.Analyte, c.Unit, in.Concentration, in.At)
}

// TopDown computes the top-down estimate of method's analyte from the
// verifications of its current curves measured in [from, to); a zero to is
// now (the service's clock), a zero from is DefaultTopDownWindow before to.
// Refused (KindInvalid, on a query parameter) for an analyte the method's
// latest revision does not list, a period that is empty, and a history of
// fewer than MinTopDownRecoveries recoveries or no reference-material
// result.
func (s *Service) TopDown(ctx context.Context, method, analyte string, from, to time.Time) (*TopDownEstimate, error) {
	if err := CheckQueryTimes("from", from, "to", to); err != nil {
		return nil, err
	}
	if to.IsZero() {
		to = s.now()
	}
	if from.IsZero() {
		from = to.Add(-DefaultTopDownWindow)
	}
	if !from.Before(to) {
		return nil, ParamError(KindInvalid, InQuery, "from", "from (%s) must lie before to (%s)", from.UTC().Format(time.RFC3339), to.UTC().Format(time.RFC3339))
	}
	m, err := s.GetMethod(ctx, method)
	if err != nil {
		return nil, err
	}
	a, ok := m.Analyte(analyte)
	if !ok {
		return nil, ParamError(KindInvalid, InQuery, "analyte", "method %s does not list the analyte %q", method, analyte)
	}
	q := TopDownQuery{Method: method, Analyte: analyte, From: from, To: to}
	h, err := s.ReadTopDownHistory(ctx, q)
	if err != nil {
		return nil, err
	}
	return topDownFrom(q, a.Unit, h)
}

// topDownFrom computes the estimate of q from its stored points.
func topDownFrom(q TopDownQuery, unit string, h *TopDownHistory) (*TopDownEstimate, error) {
	est := &TopDownEstimate{Method: q.Method, Analyte: q.Analyte, Unit: unit, From: q.From.UTC(), To: q.To.UTC(),
		QC: make([]TopDownPoint, 0, len(h.Points)), CRM: []TopDownPoint{}, Unread: h.Unread, Notes: []string{}}
	in := calib.TopDownInput{QCRecoveries: make([]float64, 0, len(h.Points))}
	for _, p := range h.Points {
		est.QC = append(est.QC, p)
		in.QCRecoveries = append(in.QCRecoveries, p.RecoveryPct/100)
		if p.Material != "" {
			est.CRM = append(est.CRM, p)
			in.CRM = append(in.CRM, calib.CRMResult{Measured: p.Found, Reference: p.Concentration, RefStdUncertainty: p.MaterialRelU * p.Concentration})
		}
	}
	period := fmt.Sprintf("from %s to %s", est.From.Format(time.RFC3339), est.To.Format(time.RFC3339))
	short := func(format string, args ...any) error {
		return &Error{Kind: KindInvalid, In: InQuery, Field: "/from", Message: fmt.Sprintf(format, args...), ShortOfData: true}
	}
	switch {
	case len(in.QCRecoveries) < MinTopDownRecoveries:
		return nil, short("the history of %s by %s %s holds %d verification recoveries on current curves; a top-down estimate needs at least %d (widen the period)",
			q.Analyte, q.Method, period, len(in.QCRecoveries), MinTopDownRecoveries)
	case len(in.CRM) < MinTopDownCRM:
		return nil, short("the history of %s by %s %s holds no verification of a reference material, so no bias; record one with the verification's material (or widen the period)",
			q.Analyte, q.Method, period)
	}
	td, err := calib.ComputeTopDown(in)
	if err != nil {
		return nil, short("the history of %s by %s %s gives no top-down estimate: %v", q.Analyte, q.Method, period, err)
	}
	est.Estimate = td
	if n := len(in.QCRecoveries); n < AdvisedTopDownRecoveries {
		est.Notes = append(est.Notes, fmt.Sprintf("Only %d recoveries: u(Rw) is usually taken from at least %d control values (common practice, figure from memory); treat the estimate as provisional.", n, AdvisedTopDownRecoveries))
	}
	if n := len(in.CRM); n < AdvisedTopDownCRM {
		est.Notes = append(est.Notes, fmt.Sprintf("Only %d reference-material result(s): the bias rests on fewer than %d (common practice, figure from memory); treat it as provisional.", n, AdvisedTopDownCRM))
	}
	return est, nil
}

// Relative is the estimate's relative combined standard uncertainty u_c.
func (e *TopDownEstimate) Relative() float64 { return e.Estimate.Combined }

// HistoryTopDown is the estimate a result computed now uses when its
// method's spec takes the top-down estimate from the history: the default
// period ending now. When the history is too short it returns a nil
// estimate and the reason (gap); err is for a failed read only.
func (s *Service) HistoryTopDown(ctx context.Context, method, analyte string) (est *TopDownEstimate, gap string, err error) {
	est, err = s.TopDown(ctx, method, analyte, time.Time{}, time.Time{})
	if KindOf(err) == KindInvalid {
		return nil, err.Error(), nil
	}
	if err != nil {
		return nil, "", err
	}
	return est, "", nil
}
