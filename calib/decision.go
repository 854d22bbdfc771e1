package calib

import "math"

// DecisionRule is how a result with its expanded uncertainty is compared
// with a specification limit (ISO/IEC 17025:2017 §7.8.6; ILAC G8:09/2019).
type DecisionRule string

const (
	// RuleSimple: simple acceptance, the result against the limit with no
	// regard to U. At the limit the risk of a wrong decision reaches 50 %.
	RuleSimple DecisionRule = "simple_acceptance"
	// RuleGuardBand: guarded acceptance with a guard band w = U; a result
	// is accepted only when it lies inside the limit by at least U (for a
	// 95 % U and a normal distribution the false-accept risk is below 2.5 %).
	RuleGuardBand DecisionRule = "guard_band_u"
)

// Outcomes of a conformity statement, from best to worst.
const (
	OutcomePass            = "pass"
	OutcomeConditionalPass = "conditional pass" // inside the limit, but closer to it than U
	OutcomeConditionalFail = "conditional fail" // outside the limit, but closer to it than U
	OutcomeFail            = "fail"
)

// Specification is a lower limit, an upper limit or both.
type Specification struct {
	Lower, Upper       float64
	HasLower, HasUpper bool
	Unit               string // for the statement's reader; not interpreted
}

// UpperLimit returns a specification with only an upper limit.
func UpperLimit(v float64, unit string) Specification {
	return Specification{Upper: v, HasUpper: true, Unit: unit}
}

// LowerLimit returns a specification with only a lower limit.
func LowerLimit(v float64, unit string) Specification {
	return Specification{Lower: v, HasLower: true, Unit: unit}
}

// Between returns a specification with both limits.
func Between(lo, hi float64, unit string) Specification {
	return Specification{Lower: lo, Upper: hi, HasLower: true, HasUpper: true, Unit: unit}
}

// Conformity is a statement of conformity: the rule, the specification, the
// result with its U, the outcome and what the outcome means for the risk.
type Conformity struct {
	Rule     DecisionRule
	Spec     Specification
	Result   float64
	Expanded float64 // U
	// AcceptLow, AcceptHigh are the acceptance limits the rule applied (the
	// specification limits moved inward by U for RuleGuardBand); ±Inf for a
	// side without a limit.
	AcceptLow, AcceptHigh float64
	Outcome               string // one of the Outcome constants
	// Accepted: the outcome is "pass". RuleSimple states only pass or
	// fail; under RuleGuardBand a conditional outcome is not accepted.
	Accepted bool
	Risk     string // plain wording of the risk behind the outcome
	Cautions []string
}

// Decide states the conformity of result, with expanded uncertainty U (at
// about 95 %), to spec under rule.
//
// Simple acceptance: pass when lower ≤ result ≤ upper (a result on the
// limit passes), else fail. Guard band w = U, per limit (upper shown; the
// lower mirrors it): result ≤ upper − U pass; ≤ upper conditional pass;
// ≤ upper + U conditional fail; beyond, fail. With two limits the worse
// side decides. Only "pass" is accepted under the guard band.
//
// Preconditions: result finite, U finite and ≥ 0, at least one finite
// limit, lower ≤ upper when both are given.
func Decide(result, u float64, spec Specification, rule DecisionRule) (Conformity, error) {
	c, err := Judge(result, u, spec, rule)
	if err != nil {
		return Conformity{}, err
	}
	c.Cautions = Cautions()
	return c, nil
}

// Judge is Decide without the cautions (Cautions is nil), and allocates
// nothing: for a caller that states the cautions once beside many results.
func Judge(result, u float64, spec Specification, rule DecisionRule) (Conformity, error) {
	if math.IsNaN(u) || math.IsInf(u, 0) || u < 0 {
		return Conformity{}, inputErr("expanded_uncertainty", "must be a finite number ≥ 0, got %v", u)
	}
	return judge(result, u, u, spec, rule)
}

// DecideInterval is Decide for a coverage interval [low, high] about the
// result that need not be symmetric (a Monte Carlo interval, JCGM 101
// §7.7): under the guard band the band at an upper limit is high − result,
// at a lower limit result − low (each at least 0). Expanded is the larger
// of the two. Preconditions: those of Decide, low ≤ high, both finite.
func DecideInterval(result, low, high float64, spec Specification, rule DecisionRule) (Conformity, error) {
	if math.IsNaN(low) || math.IsInf(low, 0) || math.IsNaN(high) || math.IsInf(high, 0) || low > high {
		return Conformity{}, inputErr("interval", "needs finite ends, low ≤ high, got [%v, %v]", low, high)
	}
	c, err := judge(result, max(0, result-low), max(0, high-result), spec, rule)
	if err != nil {
		return Conformity{}, err
	}
	c.Cautions = Cautions()
	return c, nil
}

// judge states the conformity with the bands wLow at a lower limit and
// wHigh at an upper limit (both U for a symmetric interval).
func judge(result, wLow, wHigh float64, spec Specification, rule DecisionRule) (Conformity, error) {
	if math.IsNaN(result) || math.IsInf(result, 0) {
		return Conformity{}, inputErr("result", "not a finite number")
	}
	if !spec.HasLower && !spec.HasUpper {
		return Conformity{}, inputErr("specification", "needs a lower or an upper limit")
	}
	for _, l := range []struct {
		has bool
		v   float64
	}{{spec.HasLower, spec.Lower}, {spec.HasUpper, spec.Upper}} {
		if l.has && (math.IsNaN(l.v) || math.IsInf(l.v, 0)) {
			return Conformity{}, inputErr("specification", "limit is not a finite number")
		}
	}
	if spec.HasLower && spec.HasUpper && spec.Lower > spec.Upper {
		return Conformity{}, inputErr("specification", "lower limit %v above upper limit %v", spec.Lower, spec.Upper)
	}
	if rule != RuleSimple && rule != RuleGuardBand {
		return Conformity{}, inputErr("rule", "unknown decision rule %q", rule)
	}
	c := Conformity{Rule: rule, Spec: spec, Result: result, Expanded: max(wLow, wHigh),
		AcceptLow: math.Inf(-1), AcceptHigh: math.Inf(1)}
	if rule != RuleGuardBand {
		wLow, wHigh = 0, 0
	}
	rank := 0 // 0 pass, 1 conditional pass, 2 conditional fail, 3 fail
	if spec.HasUpper {
		c.AcceptHigh = spec.Upper - wHigh
		rank = max(rank, sideRank(result-spec.Upper, wHigh))
	}
	if spec.HasLower {
		c.AcceptLow = spec.Lower + wLow
		rank = max(rank, sideRank(spec.Lower-result, wLow))
	}
	c.Outcome = Outcomes[rank]
	c.Accepted = rank == 0
	c.Risk = riskWording(rule, rank)
	return c, nil
}

// sideRank ranks a result that exceeds one limit by d (d ≤ 0: inside)
// with guard band w: 0 pass, 1 conditional pass, 2 conditional fail, 3 fail.
// With w = 0 only 0 and 3 occur.
func sideRank(d, w float64) int {
	switch {
	case d <= -w:
		return 0
	case d <= 0:
		return 1
	case d <= w:
		return 2
	default:
		return 3
	}
}

// Outcomes lists the outcomes of a conformity statement, from best to worst.
var Outcomes = [...]string{OutcomePass, OutcomeConditionalPass, OutcomeConditionalFail, OutcomeFail}

// Risk returns the wording of the risk that Decide states for the outcome
// (one of Outcomes) under the rule; "" for an unknown outcome.
func (rule DecisionRule) Risk(outcome string) string {
	for rank, o := range Outcomes {
		if o == outcome {
			return riskWording(rule, rank)
		}
	}
	return ""
}

func riskWording(rule DecisionRule, rank int) string {
	if rule == RuleSimple {
		if rank == 0 {
			return "Simple acceptance: the result is within the specification; U was not taken into account, and for a result close to a limit the chance that the true value lies outside can reach 50 %."
		}
		return "Simple acceptance: the result is outside the specification; U was not taken into account, and for a result close to a limit the chance that the true value lies inside can reach 50 %."
	}
	return [...]string{
		"Guard band w = U: the result is within the specification by at least U; the chance that the true value lies outside is below about 2.5 % (95 % coverage, normal distribution).",
		"Guard band w = U: the result is within the specification but closer to a limit than U; conformity cannot be stated at the level of confidence of U, and the rule does not accept it.",
		"Guard band w = U: the result is outside the specification but closer to a limit than U; non-conformity cannot be stated at the level of confidence of U.",
		"Guard band w = U: the result is outside the specification by more than U; the chance that the true value lies inside is below about 2.5 % (95 % coverage, normal distribution).",
	}[rank]
}
