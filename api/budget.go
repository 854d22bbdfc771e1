package api

import (
	"context"
	"sync"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// budgetCache keeps each curve's budget context: its method revision, run
// and materials never change, so an entry never goes stale. It is emptied
// when it holds maxBudgetContexts entries.
type budgetCache struct {
	mu sync.Mutex
	m  map[string]lab.BudgetContext
}

const maxBudgetContexts = 4096

// budgetContext returns what the budgets of predictions against c need.
func (s *Server) budgetContext(ctx context.Context, c *lab.Curve) (lab.BudgetContext, error) {
	s.budgets.mu.Lock()
	bc, ok := s.budgets.m[c.ID]
	s.budgets.mu.Unlock()
	if ok {
		return bc, nil
	}
	bc, _, err := byID(ctx, s, func(rd *lab.Service) (lab.BudgetContext, error) { return rd.CurveBudgetContext(ctx, c) })
	if err != nil {
		return lab.BudgetContext{}, err
	}
	s.budgets.mu.Lock()
	if s.budgets.m == nil || len(s.budgets.m) >= maxBudgetContexts {
		s.budgets.m = make(map[string]lab.BudgetContext)
	}
	s.budgets.m[c.ID] = bc
	s.budgets.mu.Unlock()
	return bc, nil
}

// predictionBudget is the budget of one prediction, with the Monte Carlo
// check when mc asks for it; nil without a spec.
func predictionBudget(c *lab.Curve, bc lab.BudgetContext, pr calib.Prediction, responses []float64, dilution float64, mc *oapi.MonteCarloRequest) (*oapi.UncertaintyBudget, error) {
	if bc.Spec == nil {
		return nil, nil
	}
	rec, err := lab.ResultBudget(c.Report, pr, responses, dilution, bc)
	if err != nil {
		return nil, err
	}
	if mc != nil {
		req := lab.MCRequest{Seed: uint64(mc.Seed)}
		if mc.Draws != nil {
			req.Draws = *mc.Draws
		}
		if err := rec.AddMonteCarlo(req); err != nil {
			return nil, err
		}
	}
	return budgetOut(rec), nil
}

// budgetOut converts a budget record to its schema; the two share their
// JSON form.
func budgetOut(rec *lab.BudgetRecord) *oapi.UncertaintyBudget {
	return viaJSON[oapi.UncertaintyBudget](rec)
}
