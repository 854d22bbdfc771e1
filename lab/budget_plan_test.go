package lab_test

import (
	"fmt"
	"math/rand/v2"
	"reflect"
	"testing"

	"curvekeeper/calib"
	"curvekeeper/lab"
)

// budgetPlanCurves fits invented curves of each model the budgets meet:
// a straight line (unweighted and 1/x), a line through the origin, a
// quadratic and a line with a weakly determined slope, 7 levels in
// duplicate with noise from a fixed seed.
func budgetPlanCurves(t *testing.T) map[string]*calib.Report {
	t.Helper()
	rng := rand.New(rand.NewPCG(21, 5))
	out := map[string]*calib.Report{}
	for _, c := range []struct {
		name  string
		opt   calib.Options
		f     func(x float64) float64
		noise float64 // relative SD of the readings
	}{
		{"linear", calib.Options{Model: calib.Linear}, func(x float64) float64 { return 0.02 + 0.51*x }, 0.01},
		{"linear 1/x", calib.Options{Model: calib.Linear, Weighting: calib.WeightInvX}, func(x float64) float64 { return 0.01 + 0.3*x }, 0.01},
		{"origin", calib.Options{Model: calib.LinearOrigin}, func(x float64) float64 { return 0.4 * x }, 0.01},
		{"quadratic", calib.Options{Model: calib.Quadratic}, func(x float64) float64 { return 0.01 + 0.5*x - 0.02*x*x }, 0.01},
		// A weakly determined slope: the GUM screen sends its results to
		// ResultBudget's Monte Carlo check.
		{"weak line", calib.Options{Model: calib.Linear}, func(x float64) float64 { return 0.1 + 0.004*x }, 0.05},
	} {
		var pts []calib.Point
		for i, x := range []float64{0.5, 1, 2, 3, 4, 6, 8} {
			for range 2 {
				pts = append(pts, calib.Point{Level: fmt.Sprintf("L%d", i+1), X: x, Y: c.f(x) * (1 + c.noise*rng.NormFloat64())})
			}
		}
		rep, err := calib.Fit(pts, c.opt)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		out[c.name] = rep
	}
	return out
}

// budgetPlanSpecs are method specs that together use every term, both
// coverages and every kind of limits and rule.
func budgetPlanSpecs() map[string]*lab.UncertaintySpec {
	lo, hi := 0.4, 3.0
	rec := &lab.RecoverySpec{Mean: 0.97, StdUncertainty: 0.015, DF: 8}
	prep := []lab.PrepStep{{AliquotML: 10, AliquotTolML: 0.02, FinalML: 100, FinalTolML: 0.1}, {AliquotML: 5, AliquotTolML: 0.015, FinalML: 50, FinalTolML: 0.06}}
	return map[string]*lab.UncertaintySpec{
		"calibration only": {},
		"three terms, upper guard band": {Terms: []string{lab.TermCalibration, lab.TermStandards, lab.TermRecovery}, Recovery: rec,
			Limits: &lab.SpecLimits{Upper: &hi, Rule: string(calib.RuleGuardBand)}},
		"all terms, k2, both limits simple": {Terms: []string{lab.TermRepeatability, lab.TermStandards, lab.TermPreparation, lab.TermRecovery},
			Recovery: rec, Preparation: prep, Coverage: string(calib.CoverageK2),
			Limits: &lab.SpecLimits{Lower: &lo, Upper: &hi, Rule: string(calib.RuleSimple)}},
		"repeatability first, lower guard band": {Terms: []string{lab.TermRepeatability, lab.TermPreparation}, Preparation: prep[:1],
			Limits: &lab.SpecLimits{Lower: &lo, Rule: string(calib.RuleGuardBand)}},
	}
}

// TestBudgetPlanMatchesResultBudget checks the plan's fast path against the
// reference, ResultBudget: on every invented curve, spec, standards' term
// (present or missing), dilution and set of readings (one, two, three, and
// readings off the curve), Compute gives a budget exactly when ResultBudget
// does and Record returns the same record, number for number; one figures
// value serves every sample, as on the prediction route. Results the GUM
// screen puts in doubt are left to ResultBudget, which must then have run
// its Monte Carlo check.
func TestBudgetPlanMatchesResultBudget(t *testing.T) {
	std := &lab.StandardsTerm{Code: "CRM-P", Stock: "STOCK-P", Relative: 0.004, Name: "standards: CRM-P", Group: "stock:STOCK-P"}
	readings := [][]float64{{0.9}, {0.6, 0.62}, {1.2, 1.25, 1.18}, {0.05, 0.06}, {-0.5, -0.4}, {2.5, 9.0}, {0.3, 0.31, 0.29}}
	compared, budgets, screened := 0, 0, 0
	for cn, rep := range budgetPlanCurves(t) {
		for sn, spec := range budgetPlanSpecs() {
			for _, st := range []*lab.StandardsTerm{std, nil} {
				bc := lab.BudgetContext{Spec: spec, Unit: "mg/L", Standards: st}
				plan := lab.NewBudgetPlan(bc)
				if plan == nil {
					t.Fatalf("%s: no plan for a bottom-up spec", sn)
				}
				var f lab.BudgetFigures
				for _, dil := range []float64{1, 5} {
					for _, ys := range readings {
						name := fmt.Sprintf("%s/%s/standards %v/dilution %v/%v", cn, sn, st != nil, dil, ys)
						pr, err := rep.Predict(ys, dil, 0)
						if err != nil {
							t.Fatalf("%s: %v", name, err)
						}
						want, err := lab.ResultBudget(rep, pr, ys, dil, bc)
						if err != nil {
							t.Fatalf("%s: reference: %v", name, err)
						}
						if !plan.Covers(rep, pr) {
							screened++
							if want != nil && (want.MonteCarlo == nil || want.MonteCarlo.Trigger != lab.MCTriggerScreened) {
								t.Fatalf("%s: the plan leaves a screened result to ResultBudget, which ran no Monte Carlo check", name)
							}
							continue
						}
						ok, err := plan.Compute(rep, pr, ys, dil, &f)
						if err != nil {
							t.Fatalf("%s: plan: %v", name, err)
						}
						compared++
						if ok != (want != nil) {
							t.Fatalf("%s: plan gives a budget %v, reference %v", name, ok, want != nil)
						}
						if !ok {
							continue
						}
						budgets++
						if got := plan.Record(&f); !reflect.DeepEqual(got, want) {
							t.Errorf("%s:\nplan      %+v\nreference %+v", name, got, want)
						}
					}
				}
			}
		}
	}
	if screened == 0 {
		t.Error("no result was screened: the weak line does not reach the screen")
	}
	if budgets < compared/2 {
		t.Fatalf("only %d of %d cases gave a budget: the comparison is too thin", budgets, compared)
	}
	t.Logf("%d cases compared, %d with a budget; %d screened for Monte Carlo", compared, budgets, screened)
}

// TestBudgetPlanCovers checks which contexts get a plan: none without a
// spec, for the top-down and larger approaches, or with Monte Carlo asked.
func TestBudgetPlanCovers(t *testing.T) {
	for _, c := range []struct {
		name string
		bc   lab.BudgetContext
		want bool
	}{
		{"no spec", lab.BudgetContext{}, false},
		{"bottom-up", lab.BudgetContext{Spec: &lab.UncertaintySpec{Approach: lab.ApproachBottomUp}}, true},
		{"default approach", lab.BudgetContext{Spec: &lab.UncertaintySpec{}}, true},
		{"top-down", lab.BudgetContext{Spec: &lab.UncertaintySpec{Approach: lab.ApproachTopDown, TopDownRelative: 0.05}}, false},
		{"larger", lab.BudgetContext{Spec: &lab.UncertaintySpec{Approach: lab.ApproachLarger, TopDownRelative: 0.05}}, false},
		{"Monte Carlo", lab.BudgetContext{Spec: &lab.UncertaintySpec{}, MonteCarlo: &lab.MCRequest{Seed: 1}}, false},
	} {
		if got := lab.NewBudgetPlan(c.bc) != nil; got != c.want {
			t.Errorf("%s: plan %v, want %v", c.name, got, c.want)
		}
	}
}
