package api

import (
	"context"
	"sync"
	"time"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// GetMethodTopDown answers a method's top-down uncertainty of an analyte
// from the stored QC history, with the data it used. It tolerates the
// replica lag: the history of the period read a moment late is the same
// estimate a moment earlier (a method the replica does not know yet is
// asked of the primary, byID).
func (s *Server) GetMethodTopDown(ctx context.Context, req oapi.GetMethodTopDownRequestObject) (oapi.GetMethodTopDownResponseObject, error) {
	var from, to time.Time
	if req.Params.From != nil {
		from = req.Params.From.Time
	}
	if req.Params.To != nil {
		to = req.Params.To.Time
	}
	est, _, err := byID(ctx, s, func(rd *lab.Service) (*lab.TopDownEstimate, error) {
		return rd.TopDown(ctx, string(req.Name), string(req.Params.Analyte), from, to)
	})
	if err != nil {
		return nil, err
	}
	return oapi.GetMethodTopDown200JSONResponse(TopDownReportOf(est)), nil
}

// TopDownReportOf converts an estimate to its schema (the QA page shows
// the same).
func TopDownReportOf(e *lab.TopDownEstimate) oapi.TopDownReport {
	td := e.Estimate
	out := oapi.TopDownReport{Method: e.Method, Analyte: e.Analyte, Unit: e.Unit,
		From: oapi.NewTimestamp(e.From), To: oapi.NewTimestamp(e.To), URw: td.URw, RmsBias: td.RMSBias, UCref: td.URef,
		UBias: td.UBias, Combined: td.Combined, Expanded: td.Expanded, CoverageFactor: 2,
		RecoveriesCount: td.QCCount, ReferenceCount: td.CRMCount, UnreadCount: e.Unread,
		Recoveries: topDownPoints(e.QC), ReferenceResults: topDownPoints(e.CRM), Notes: nonNilS(e.Notes), Cautions: calib.Cautions()}
	return out
}

func topDownPoints(ps []lab.TopDownPoint) []oapi.TopDownPoint {
	out := make([]oapi.TopDownPoint, len(ps))
	for i, p := range ps {
		out[i] = oapi.TopDownPoint{VerificationID: uuidOf(p.VerificationID), CurveID: uuidOf(p.CurveID),
			Kind: oapi.VerificationKind(p.Kind), Level: p.Level, AcquiredAt: oapi.NewTimestamp(p.At),
			Concentration: p.Concentration, Found: p.Found, RecoveryPct: p.RecoveryPct, Passed: p.Passed}
		if p.Material != "" {
			m, u := p.Material, p.MaterialRelU
			out[i].Material, out[i].ReferenceURel = &m, &u
		}
	}
	return out
}

// historyCache keeps the top-down estimate from the QC history per method
// and analyte for the prediction route, whose budget under
// top_down_source history takes it. An entry is dropped when this server
// stores a verification, reviews, signs or revises a curve (reset), and
// lives at most historyTTL, which bounds how long another server's writes,
// and the period's end moving with the clock, go unseen.
type historyCache struct {
	mu sync.Mutex
	m  map[[2]string]historyEntry
}

type historyEntry struct {
	est  *lab.TopDownEstimate
	gap  string
	read time.Time
}

const historyTTL = time.Minute

func (h *historyCache) reset() {
	h.mu.Lock()
	h.m = nil
	h.mu.Unlock()
}

// curveChanged forgets what a change of curve id (its review status, a
// revision, a verification) makes stale.
func (s *Server) curveChanged(id string) {
	s.curves.drop(id)
	s.history.reset()
}

// withHistory adds to bc (a copy) the top-down estimate of the curve's
// method and analyte from the QC history when bc's spec asks for it.
func (s *Server) withHistory(ctx context.Context, c *lab.Curve, bc lab.BudgetContext) (lab.BudgetContext, error) {
	sp := bc.Spec
	if sp == nil || sp.TopDownSource != lab.TopDownSourceHistory || sp.Approach == "" || sp.Approach == lab.ApproachBottomUp {
		return bc, nil
	}
	key, now := [2]string{c.Method, c.Analyte}, s.lab.Now()
	s.history.mu.Lock()
	e, ok := s.history.m[key]
	s.history.mu.Unlock()
	if !ok || now.Sub(e.read) >= historyTTL || now.Before(e.read) {
		est, gap, err := s.reading(ctx).HistoryTopDown(ctx, c.Method, c.Analyte)
		if err != nil {
			return bc, err
		}
		e = historyEntry{est: est, gap: gap, read: now}
		s.history.mu.Lock()
		if s.history.m == nil || len(s.history.m) >= maxBudgetContexts {
			s.history.m = make(map[[2]string]historyEntry)
		}
		s.history.m[key] = e
		s.history.mu.Unlock()
	}
	bc.History, bc.HistoryGap = e.est, e.gap
	return bc, nil
}
