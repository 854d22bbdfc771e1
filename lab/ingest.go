package lab

import (
	"context"
	"errors"
	"fmt"

	"curvekeeper/calib"
)

// RunStore is the persistence ingest needs.
type RunStore interface {
	// ReadForRun reads, in one round trip, the stored answer of an
	// idempotency key, the method's latest revision (KindNotFound when
	// there is none) and the drift history of the run's analytes.
	ReadForRun(ctx context.Context, q RunReadsQuery) (*RunReads, error)
	// CreateRun stores a run, its curves and their audit rows in one
	// transaction; see the store for how a reused key is answered.
	CreateRun(ctx context.Context, in RunInput, curves []CurveInput) (*RunCreated, error)
}

// Ingest takes a run an instrument sent on behalf of p: it checks the run
// against the latest revision of its method, fits one curve per analyte,
// judges each new curve's slope against its history (drift), and stores the
// run with its curves, each pending review. A run whose numbers are valid
// but cannot be fitted is stored too, with a failed curve saying why: the
// instrument's raw data is never thrown away. in.Method names the method;
// in.MethodRevision, TokenID and Actor are filled in here.
func (s *Service) Ingest(ctx context.Context, p Principal, in RunInput) (*RunCreated, error) {
	if err := p.MayUse(in.Instrument); err != nil {
		return nil, err
	}
	at := InBody // a CSV run names its acquired_at as a query parameter
	if in.SourceFormat == FormatCSV {
		at = InQuery
	}
	if err := s.checkClaimed(at, "/acquired_at", in.AcquiredAt, s.now()); err != nil {
		return nil, err
	}
	// One round trip for the idempotency key, the method's latest revision
	// and the drift history of every analyte the run names.
	reads, err := s.store.ReadForRun(ctx, RunReadsQuery{TokenID: p.TokenID, Key: in.IdempotencyKey, RequestHash: in.RequestHash,
		Method: in.Method, Instrument: in.Instrument, Analytes: runAnalytes(in.Standards),
		Before: in.AcquiredAt, Limit: driftHistory})
	if err != nil {
		if KindOf(err) == KindNotFound {
			return nil, FieldError("/method", "no method is called %q; an administrator defines methods with POST /v1/methods", in.Method)
		}
		return nil, err
	}
	if reads.Replay != nil {
		return reads.Replay, nil
	}
	m := reads.Method
	curves, err := fitRun(m, &in)
	if err != nil {
		return nil, err
	}
	addDriftChecks(m, reads.Slopes, curves)
	if len(in.Materials) > 0 {
		if err := checkMaterialCodes(in.Materials); err != nil {
			return nil, err
		}
		lineage, err := s.store.MaterialLineage(ctx, in.Materials)
		if err != nil {
			return nil, err
		}
		if err := addStandardsChecks(m, &in, lineage, curves); err != nil {
			return nil, err
		}
	}
	for i := range curves {
		bc := curves[i].BudgetContext()
		if err := s.addHistory(ctx, m.Name, curves[i].Analyte, &bc); err != nil {
			return nil, err
		}
		curves[i].History, curves[i].HistoryGap = bc.History, bc.HistoryGap
	}
	in.MethodRevision = m.Revision
	in.TokenID, in.Actor = p.TokenID, p.Actor()
	return s.store.CreateRun(ctx, in, curves)
}

// runAnalytes lists the analyte of every standard of a run (with repeats).
func runAnalytes(standards []Standard) []string {
	out := make([]string, 0, len(standards))
	for _, st := range standards {
		out = append(out, st.Analyte)
	}
	return out
}

// fitRun checks the run against its method and fits one curve per analyte
// (CPU work, done before the transaction opens).
func fitRun(m *Method, in *RunInput) ([]CurveInput, error) {
	type concKey struct {
		analyte string
		conc    float64
	}
	seen := levels{}
	concAt := map[concKey]string{} // level label holding each concentration
	var order []string
	points := map[string][]calib.Point{}
	calIS, highest := map[string][]float64{}, map[string]float64{}
	for i, st := range in.Standards {
		a := st.Analyte
		if _, ok := m.Analyte(a); !ok {
			return nil, FieldError(Pointer("standards", i, "analyte"), "method %s does not list the analyte %q", m.Name, a)
		}
		if err := seen.add(i, st); err != nil {
			return nil, err
		}
		ck := concKey{a, st.Concentration}
		if other, dup := concAt[ck]; dup {
			return nil, FieldError(Pointer("standards", i, "concentration"), "levels %q and %q of %s share the concentration %v; send replicates as several responses of one standard", other, st.Level, a, st.Concentration)
		}
		concAt[ck] = st.Level
		if _, ok := points[a]; !ok {
			order = append(order, a)
		}
		an, _ := m.Analyte(a)
		ys, err := isRatios(an, st.Responses, st.ISResponses, Pointer("standards", i, "is_responses"))
		if err != nil {
			return nil, err
		}
		for _, y := range ys {
			points[a] = append(points[a], calib.Point{Level: st.Level, X: st.Concentration, Y: y})
		}
		calIS[a] = append(calIS[a], st.ISResponses...)
		highest[a] = max(highest[a], st.Concentration)
	}
	type sampleKey struct{ analyte, id string }
	seenSample := map[sampleKey]bool{}
	for i, sm := range in.Samples {
		a := sm.Analyte
		sk := sampleKey{a, sm.ID}
		if seenSample[sk] {
			return nil, FieldError(Pointer("samples", i, "id"), "sample %q of %s appears twice; send replicates as several responses of one sample", sm.ID, a)
		}
		seenSample[sk] = true
		if _, ok := m.Analyte(a); !ok {
			return nil, FieldError(Pointer("samples", i, "analyte"), "method %s does not list the analyte %q", m.Name, a)
		}
		if _, ok := points[a]; !ok {
			return nil, FieldError(Pointer("samples", i, "analyte"), "the run has no standards for %q to quantify this sample against", a)
		}
		an, _ := m.Analyte(a)
		if _, err := isRatios(an, sm.Responses, sm.ISResponses, Pointer("samples", i, "is_responses")); err != nil {
			return nil, err
		}
		if err := checkPrep(sm.Prep, fmt.Sprintf("/samples/%d", i)); err != nil {
			return nil, err
		}
	}
	if err := checkSequence(m, in.Sequence, in.Samples); err != nil {
		return nil, err
	}
	curves := make([]CurveInput, 0, len(order))
	for _, a := range order {
		an, _ := m.Analyte(a)
		opts := m.OptionsFor(a)
		rep, err := calib.Fit(points[a], opts)
		if err != nil {
			var ie *calib.InputError
			if !errors.As(err, &ie) {
				return nil, fmt.Errorf("lab: fit %s: %w", a, err)
			}
			rep = calib.FailedReport(points[a], opts, err)
		}
		curves = append(curves, CurveInput{Analyte: a, Unit: an.Unit, Report: rep, Rules: an, CalibratorIS: calIS[a], Highest: highest[a]})
	}
	return curves, nil
}
