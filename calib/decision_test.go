package calib

import (
	"math"
	"testing"
)

// The zones of ILAC G8:09/2019 with a guard band w = U, and simple
// acceptance (ISO/IEC 17025:2017 §7.8.6), on an upper limit of 10 with
// U = 0.5: acceptance limit 9.5; conditional zones 9.5–10 and 10–10.5.
func TestDecide(t *testing.T) {
	upper, lower, both := UpperLimit(10, "mg/L"), LowerLimit(2, "mg/L"), Between(2, 10, "mg/L")
	for _, c := range []struct {
		name     string
		result   float64
		spec     Specification
		rule     DecisionRule
		outcome  string
		accepted bool
	}{
		{"guard: well below upper", 9.4, upper, RuleGuardBand, OutcomePass, true},
		{"guard: on the acceptance limit", 9.5, upper, RuleGuardBand, OutcomePass, true},
		{"guard: inside, within U", 9.8, upper, RuleGuardBand, OutcomeConditionalPass, false},
		{"guard: on the limit", 10, upper, RuleGuardBand, OutcomeConditionalPass, false},
		{"guard: outside, within U", 10.3, upper, RuleGuardBand, OutcomeConditionalFail, false},
		{"guard: outside by more than U", 10.6, upper, RuleGuardBand, OutcomeFail, false},
		{"simple: on the limit", 10, upper, RuleSimple, OutcomePass, true},
		{"simple: just above", 10.01, upper, RuleSimple, OutcomeFail, false},
		{"simple: within U above", 10.3, upper, RuleSimple, OutcomeFail, false},
		{"guard lower: well above", 2.6, lower, RuleGuardBand, OutcomePass, true},
		{"guard lower: within U above", 2.2, lower, RuleGuardBand, OutcomeConditionalPass, false},
		{"guard lower: within U below", 1.8, lower, RuleGuardBand, OutcomeConditionalFail, false},
		{"guard lower: far below", 1.4, lower, RuleGuardBand, OutcomeFail, false},
		{"both: middle", 6, both, RuleGuardBand, OutcomePass, true},
		{"both: near the lower", 2.3, both, RuleGuardBand, OutcomeConditionalPass, false},
		{"both: above the upper", 11, both, RuleGuardBand, OutcomeFail, false},
		{"simple both: below", 1.9, both, RuleSimple, OutcomeFail, false},
	} {
		t.Run(c.name, func(t *testing.T) {
			got, err := Decide(c.result, 0.5, c.spec, c.rule)
			if err != nil {
				t.Fatal(err)
			}
			if got.Outcome != c.outcome || got.Accepted != c.accepted {
				t.Errorf("Decide(%v ± 0.5, %+v, %s) = %q accepted=%v, want %q accepted=%v",
					c.result, c.spec, c.rule, got.Outcome, got.Accepted, c.outcome, c.accepted)
			}
			if got.Risk == "" || len(got.Cautions) == 0 || got.Rule != c.rule || got.Result != c.result || got.Expanded != 0.5 {
				t.Errorf("statement incomplete: %+v", got)
			}
		})
	}
	g, _ := Decide(5, 0.5, both, RuleGuardBand)
	if g.AcceptLow != 2.5 || g.AcceptHigh != 9.5 {
		t.Errorf("guard band acceptance limits [%v, %v], want [2.5, 9.5]", g.AcceptLow, g.AcceptHigh)
	}
	s, _ := Decide(5, 0.5, upper, RuleSimple)
	if !math.IsInf(s.AcceptLow, -1) || s.AcceptHigh != 10 {
		t.Errorf("simple acceptance limits [%v, %v], want [−Inf, 10]", s.AcceptLow, s.AcceptHigh)
	}
	for name, f := range map[string]func() error{
		"no limit":       func() error { _, err := Decide(1, 0.1, Specification{}, RuleSimple); return err },
		"inverted":       func() error { _, err := Decide(1, 0.1, Between(3, 2, ""), RuleSimple); return err },
		"negative U":     func() error { _, err := Decide(1, -0.1, upper, RuleSimple); return err },
		"NaN result":     func() error { _, err := Decide(math.NaN(), 0.1, upper, RuleSimple); return err },
		"unknown rule":   func() error { _, err := Decide(1, 0.1, upper, "shared_risk"); return err },
		"infinite limit": func() error { _, err := Decide(1, 0.1, UpperLimit(math.Inf(1), ""), RuleSimple); return err },
	} {
		if f() == nil {
			t.Errorf("%s: accepted", name)
		}
	}
}
