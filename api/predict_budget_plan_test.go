package api

import (
	"bytes"
	"fmt"
	"testing"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// TestPlannedBudgetJSONMatchesReference checks the prediction route's fast
// path for budgets against its reference: the whole answer written from the
// plan's figures as predict streams it (begin, addResult, end) must be byte for byte
// the answer written from lab.ResultBudget's record (budgetOut,
// appendPredictionJSON, which predict_json_test.go checks against
// encoding/json). Invented curves, specs with every term, limit and rule,
// units that need escaping, readings with and without a budget, all in one
// answer so that the figures and the number memo are reused from sample to
// sample.
func TestPlannedBudgetJSONMatchesReference(t *testing.T) {
	lo, hi := 0.5, 2.5
	rec := &lab.RecoverySpec{Mean: 1.02, StdUncertainty: 0.03}
	prep := []lab.PrepStep{{AliquotML: 2, AliquotTolML: 0.01, FinalML: 20, FinalTolML: 0.04}}
	specs := []*lab.UncertaintySpec{
		{Terms: []string{lab.TermStandards, lab.TermRecovery}, Recovery: rec, Limits: &lab.SpecLimits{Upper: &hi, Rule: string(calib.RuleGuardBand)}},
		{Terms: []string{lab.TermPreparation, lab.TermRepeatability}, Preparation: prep, Coverage: string(calib.CoverageK2),
			Limits: &lab.SpecLimits{Lower: &lo, Upper: &hi, Rule: string(calib.RuleSimple)}},
		{Terms: []string{lab.TermRepeatability, lab.TermStandards}, Limits: &lab.SpecLimits{Lower: &lo, Rule: string(calib.RuleGuardBand)}},
		{},
	}
	var samples [][]float64
	for i := range 24 {
		y := 0.03 + 0.11*float64(i)
		switch i % 4 {
		case 0:
			samples = append(samples, []float64{y})
		case 1:
			samples = append(samples, []float64{y * 0.99, y * 1.01})
		case 2:
			samples = append(samples, []float64{y * 0.98, y, y * 1.03})
		default:
			samples = append(samples, []float64{-y, -y * 1.1}) // off the curve's low end
		}
	}
	for _, model := range []calib.Model{calib.Linear, calib.Quadratic} {
		var pts []calib.Point
		for i, x := range []float64{0.25, 0.5, 1, 2, 3, 4} {
			y := 0.02 + 0.5*x - 0.01*x*x
			pts = append(pts, calib.Point{Level: fmt.Sprint(i), X: x, Y: y * 1.004}, calib.Point{Level: fmt.Sprint(i), X: x, Y: y * 0.995})
		}
		rep, err := calib.Fit(pts, calib.Options{Model: model})
		if err != nil {
			t.Fatal(err)
		}
		for si, spec := range specs {
			for _, unit := range []string{"mg/L", "µg/L <as N> & \"total\""} {
				var std *lab.StandardsTerm
				if si != 2 {
					std = &lab.StandardsTerm{Code: "CRM-<1>", Stock: "S&1", Relative: 0.003, Name: "standards: CRM-<1>", Group: "stock:S&1"}
				}
				bc := lab.BudgetContext{Spec: spec, Unit: unit, Standards: std}
				fast := lab.NewBudgetPlan(bc)
				j, ok := newBudgetJSONPlan(fast)
				if !ok {
					t.Fatal("no JSON plan")
				}
				bp := &budgetPlan{bc: bc, fast: fast, json: j}
				var want oapi.PredictionResponse
				got := &predictionJSONResponse{}
				got.begin()
				var f lab.BudgetFigures
				with := 0
				for i, ys := range samples {
					pr, err := rep.Predict(ys, 2, 0)
					if err != nil {
						t.Fatal(err)
					}
					res := predictionOut(fmt.Sprint(i), pr)
					r, err := lab.ResultBudget(rep, pr, ys, pr.Dilution, bc)
					if err != nil {
						t.Fatal(err)
					}
					var planned *lab.BudgetFigures
					if fast.Covers(rep, pr) {
						ok, err := fast.Compute(rep, pr, ys, pr.Dilution, &f)
						if err != nil {
							t.Fatal(err)
						}
						if ok {
							planned = &f
						}
					} else if r != nil {
						res.Uncertainty = budgetOut(r) // screened: the record, as predict does
					}
					got.Results = append(got.Results, res)
					got.addResult(bp, planned)
					if r != nil {
						res.Uncertainty = budgetOut(r)
						with++
					}
					want.Results = append(want.Results, res)
				}
				if with < len(samples)/2 {
					t.Fatalf("%s spec %d: only %d budgets among %d samples", model, si, with, len(samples))
				}
				wantJSON, err := appendPredictionJSON(nil, &want)
				if err != nil {
					t.Fatal(err)
				}
				got.end()
				if got.bodyErr != nil {
					t.Fatal(got.bodyErr)
				}
				gotJSON := got.body
				if !bytes.Equal(gotJSON, wantJSON) {
					t.Errorf("%s spec %d unit %q: planned budgets differ from the reference\nplanned   %s\nreference %s", model, si, unit, gotJSON, wantJSON)
				}
				got.release()
			}
		}
	}
}
