package api

import (
	"context"
	"sync"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// budgetCache keeps each curve's budget plan: its method revision, run
// and materials never change, so an entry never goes stale. It is emptied
// when it holds maxBudgetContexts entries.
type budgetCache struct {
	mu sync.Mutex
	m  map[string]*budgetPlan
}

const maxBudgetContexts = 4096

// budgetPlan is what the budgets of predictions against one curve need:
// its budget context and, when the context allows one (bottom-up), the
// lab's plan with the JSON of the budget's sample-independent parts.
type budgetPlan struct {
	bc   lab.BudgetContext
	fast *lab.BudgetPlan // nil: each budget by lab.ResultBudget
	json *budgetJSONPlan // nil with fast
}

// budgetPlan returns the budget plan of predictions against c.
func (s *Server) budgetPlan(ctx context.Context, c *lab.Curve) (*budgetPlan, error) {
	s.budgets.mu.Lock()
	bp, ok := s.budgets.m[c.ID]
	s.budgets.mu.Unlock()
	if ok {
		return bp, nil
	}
	bc, _, err := byID(ctx, s, func(rd *lab.Service) (lab.BudgetContext, error) { return rd.CurveBudgetContext(ctx, c) })
	if err != nil {
		return nil, err
	}
	bp = &budgetPlan{bc: bc}
	if fast := lab.NewBudgetPlan(bc); fast != nil {
		if j, ok := newBudgetJSONPlan(fast); ok {
			bp.fast, bp.json = fast, j
		}
	}
	s.budgets.mu.Lock()
	if s.budgets.m == nil || len(s.budgets.m) >= maxBudgetContexts {
		s.budgets.m = make(map[string]*budgetPlan)
	}
	s.budgets.m[c.ID] = bp
	s.budgets.mu.Unlock()
	return bp, nil
}

// predictionBudget is the budget of one prediction, with the Monte Carlo
// check when mc asks for it; nil without a spec. Without Monte Carlo the
// plan computes it into f (reused from sample to sample).
func predictionBudget(c *lab.Curve, bp *budgetPlan, pr calib.Prediction, responses []float64, dilution float64, mc *oapi.MonteCarloRequest, f *lab.BudgetFigures) (*oapi.UncertaintyBudget, error) {
	bc := bp.bc // this call's copy
	if bc.Spec == nil {
		return nil, nil
	}
	if mc == nil && bp.fast != nil && bp.fast.Covers(c.Report, pr) {
		ok, err := bp.fast.Compute(c.Report, pr, responses, dilution, f)
		if err != nil || !ok {
			return nil, err
		}
		return budgetOut(bp.fast.Record(f)), nil
	}
	if mc != nil {
		req := lab.MCRequest{Seed: uint64(mc.Seed)}
		if mc.Draws != nil {
			req.Draws = *mc.Draws
		}
		bc.MonteCarlo = &req
	}
	rec, err := lab.ResultBudget(c.Report, pr, responses, dilution, bc)
	if err != nil || rec == nil {
		return nil, err
	}
	return budgetOut(rec), nil
}

// budgetOut converts a budget record to its schema for a prediction answer,
// member by member (the route answers one per sample; a JSON round trip
// cost more than the budget itself). The cautions are left out: the answer
// states them once, beside its results.
func budgetOut(rec *lab.BudgetRecord) *oapi.UncertaintyBudget {
	out := &oapi.UncertaintyBudget{Approach: oapi.UncertaintyApproach(rec.Approach), Combined: rec.Combined,
		Coverage: oapi.CoverageRule(rec.Coverage), CoverageFactor: rec.CoverageFactor, EffectiveDf: rec.EffectiveDF,
		Expanded: rec.Expanded, ExpandedText: rec.ExpandedText, Level: rec.Level, Notes: rec.Notes,
		RelativeCombined: rec.RelativeCombined, Unit: rec.Unit, Value: rec.Value, ValueText: rec.ValueText,
		Terms: make([]oapi.BudgetTerm, len(rec.Terms))}
	for i, t := range rec.Terms {
		// The compact form of a prediction answer: name, source,
		// contribution, share and ν (the stored result has every member).
		out.Terms[i] = oapi.BudgetTerm{Contribution: t.Contribution, Df: t.DF, Name: t.Name, Share: t.Share, Source: t.Source}
		if t.Group != "" {
			g := t.Group
			out.Terms[i].Group = &g
		}
	}
	if c := rec.Conformity; c != nil {
		out.Conformity = &oapi.ConformityStatement{AcceptHigh: c.AcceptHigh, AcceptLow: c.AcceptLow, Accepted: c.Accepted,
			Lower: c.Lower, Outcome: oapi.ConformityOutcome(c.Outcome), Risk: c.Risk, Rule: oapi.DecisionRule(c.Rule),
			Statement: c.Statement, Unit: c.Unit, Upper: c.Upper}
	}
	if td := rec.TopDown; td != nil {
		out.TopDown = &oapi.TopDownEstimate{Combined: td.Combined, Expanded: td.Expanded, ExpandedText: td.ExpandedText, Relative: td.Relative}
		if td.Source != "" {
			src := oapi.TopDownSource(td.Source)
			out.TopDown.Source = &src
		}
		if h := td.History; h != nil {
			out.TopDown.History = &oapi.TopDownProvenance{From: oapi.NewTimestamp(h.From), To: oapi.NewTimestamp(h.To),
				Recoveries: h.QCCount, ReferenceResults: h.CRMCount}
		}
	}
	if m := rec.MonteCarlo; m != nil {
		out.MonteCarlo = &oapi.MonteCarloCheck{Agrees: m.Agrees, Discarded: m.Discarded, Draws: m.Draws, GumHigh: m.GUMHigh,
			GumLow: m.GUMLow, High: m.High, Level: m.Level, Low: m.Low, Mean: m.Mean, Sd: m.SD, Seed: int64(m.Seed),
			ShortHigh: m.ShortHigh, ShortLow: m.ShortLow, Tolerance: m.Tolerance}
		if m.Trigger != "" {
			tr := oapi.MonteCarloTrigger(m.Trigger)
			out.MonteCarlo.Trigger = &tr
		}
		if m.Screen != "" {
			sc := m.Screen
			out.MonteCarlo.Screen = &sc
		}
	}
	if ri := rec.ReportedInterval; ri != nil {
		out.ReportedInterval = &oapi.ReportedInterval{High: ri.High, HighText: ri.HighText, Level: ri.Level, Low: ri.Low,
			LowText: ri.LowText, Method: oapi.ReportedIntervalMethod(ri.Method), Reason: ri.Reason}
	}
	return out
}
