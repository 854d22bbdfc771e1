package calib

import (
	"math"
	"strconv"
	"strings"
)

// Control rules for a series of values over time (curve slopes, intercepts,
// residual SDs...). The names are the conventional Westgard notation: "1-2s"
// reads "one value beyond 2 SD".
//
// Source: J. O. Westgard, P. L. Barry, M. R. Hunt, T. Groth, "A multi-rule
// Shewhart chart for quality control in clinical chemistry", Clin. Chem. 27
// (1981) 493–501 (the published rule definitions, restated here from memory);
// control limits at ±2 SD (warning) and ±3 SD (action) as on a Shewhart chart
// (ISO 7870-2, from memory).
const (
	Rule12s    = "1-2s"  // warning: one value beyond mean ± 2 SD
	Rule13s    = "1-3s"  // reject: one value beyond mean ± 3 SD
	Rule22s    = "2-2s"  // reject: two consecutive values beyond the same 2 SD limit
	RuleR4s    = "R-4s"  // reject: two consecutive values, one above +2 SD and the other below −2 SD
	Rule41s    = "4-1s"  // reject: four consecutive values beyond the same 1 SD limit
	Rule10x    = "10x"   // reject: ten consecutive values on the same side of the mean
	CheckDrift = "drift" // the ingest check of a new curve's slope against its history
)

// Rules lists the control rules in the order they are evaluated and reported.
var Rules = []string{Rule12s, Rule13s, Rule22s, RuleR4s, Rule41s, Rule10x}

// RuleReject reports whether a violation of rule calls for rejection (every
// rule but the 1-2s warning).
func RuleReject(rule string) bool { return rule != Rule12s }

// RuleSource describes a rule and names its source.
func RuleSource(rule string) string {
	const src = " (Westgard et al., Clin. Chem. 27 (1981) 493)"
	switch rule {
	case Rule12s:
		return "warning: one value beyond the mean ± 2 SD" + src
	case Rule13s:
		return "reject: one value beyond the mean ± 3 SD" + src
	case Rule22s:
		return "reject: two consecutive values beyond the same mean + 2 SD or mean − 2 SD limit" + src
	case RuleR4s:
		return "reject: two consecutive values, one above the mean + 2 SD and the other below the mean − 2 SD" + src
	case Rule41s:
		return "reject: four consecutive values beyond the same mean + 1 SD or mean − 1 SD limit" + src
	case Rule10x:
		return "reject: ten consecutive values on the same side of the mean" + src
	}
	return ""
}

// Baseline is the centre and spread a series is judged against.
type Baseline struct {
	Mean float64
	SD   float64 // sample standard deviation, n − 1 in the denominator
	N    int
}

// NewBaseline returns mean = Σv/n and SD = √[Σ(v − mean)²/(n − 1)] of values.
// It needs at least two finite values that are not all equal (an SD of 0
// gives no usable limits). The mean and SD are computed in two passes, so a
// large common offset does not cost digits.
func NewBaseline(values []float64) (Baseline, error) {
	if len(values) < 2 {
		return Baseline{}, inputErr("baseline", "at least 2 values are needed, got %d", len(values))
	}
	var sum float64
	for i, v := range values {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return Baseline{}, inputErr("baseline["+strconv.Itoa(i)+"]", "value is not finite")
		}
		sum += v
	}
	n := float64(len(values))
	mean := sum / n
	var ss, comp float64
	for _, v := range values {
		d := v - mean
		ss += d * d
		comp += d
	}
	ss -= comp * comp / n // corrected two-pass (Chan, Golub & LeVeque)
	sd := math.Sqrt(math.Max(ss, 0) / (n - 1))
	if !(sd > 0) || math.IsInf(sd, 0) {
		return Baseline{}, inputErr("baseline", "the values have no spread (SD = 0), so no control limits can be set")
	}
	return Baseline{Mean: mean, SD: sd, N: len(values)}, nil
}

// ControlLimits are the lines of a Shewhart chart.
type ControlLimits struct {
	Centre                  float64 // the baseline mean
	WarningLow, WarningHigh float64 // mean ∓ 2 SD
	ActionLow, ActionHigh   float64 // mean ∓ 3 SD
}

// Limits returns the warning (±2 SD) and action (±3 SD) limits of b.
func (b Baseline) Limits() ControlLimits {
	return ControlLimits{
		Centre:     b.Mean,
		WarningLow: b.Mean - 2*b.SD, WarningHigh: b.Mean + 2*b.SD,
		ActionLow: b.Mean - 3*b.SD, ActionHigh: b.Mean + 3*b.SD,
	}
}

// Z returns (v − mean)/SD.
func (b Baseline) Z(v float64) float64 { return (v - b.Mean) / b.SD }

// Violation is one breach of a control rule: the rule and the indices into
// the series of the values involved, in order. Consecutive windows that
// breach the same rule are merged into one violation (twelve values above the
// mean are one 10x violation naming all twelve), so a persistent shift is
// reported once, with its extent.
type Violation struct {
	Rule   string
	Points []int
	Reject bool
}

// Westgard evaluates the rules of Rules on values in time order against the
// baseline b and returns the violations, ordered by their first point and
// then by the order of Rules. "Beyond" is strict: a value exactly on a limit
// does not breach it, and a value exactly at the mean is on neither side (it
// ends a 10x run). A value beyond 3 SD is reported as 1-3s only, not also as
// the 1-2s warning. Non-finite values are refused.
func Westgard(values []float64, b Baseline) ([]Violation, error) {
	if !(b.SD > 0) || math.IsInf(b.SD, 0) || math.IsNaN(b.Mean) || math.IsInf(b.Mean, 0) {
		return nil, inputErr("baseline", "needs a finite mean and a positive, finite SD")
	}
	z := make([]float64, len(values))
	for i, v := range values {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, inputErr("values["+strconv.Itoa(i)+"]", "value is not finite")
		}
		z[i] = b.Z(v)
	}
	var out []Violation
	for _, rule := range Rules {
		out = append(out, ruleViolations(rule, z)...)
	}
	// Stable order: by first point, then by rule order (already grouped by rule).
	order := map[string]int{}
	for i, r := range Rules {
		order[r] = i
	}
	sortViolations(out, order)
	return out, nil
}

// sign returns +1 above, −1 below and 0 at the limit k·SD.
func beyond(z, k float64) int {
	switch {
	case z > k:
		return 1
	case z < -k:
		return -1
	}
	return 0
}

// ruleViolations finds the windows of values (as z-scores) that breach rule
// and merges overlapping or adjacent windows of the same direction.
func ruleViolations(rule string, z []float64) []Violation {
	reject := RuleReject(rule)
	var out []Violation
	single := func(pred func(float64) bool) {
		for i, v := range z {
			if pred(v) {
				out = append(out, Violation{Rule: rule, Points: []int{i}, Reject: reject})
			}
		}
	}
	// run reports maximal runs of at least length values whose side(z) is
	// the same non-zero sign.
	run := func(length int, side func(float64) int) {
		start, dir := 0, 0
		flush := func(end int) {
			if dir != 0 && end-start >= length {
				pts := make([]int, 0, end-start)
				for i := start; i < end; i++ {
					pts = append(pts, i)
				}
				out = append(out, Violation{Rule: rule, Points: pts, Reject: reject})
			}
		}
		for i, v := range z {
			s := side(v)
			if s != dir || s == 0 {
				flush(i)
				start, dir = i, s
			}
		}
		flush(len(z))
	}
	switch rule {
	case Rule12s:
		single(func(v float64) bool { a := math.Abs(v); return a > 2 && a <= 3 })
	case Rule13s:
		single(func(v float64) bool { return math.Abs(v) > 3 })
	case Rule22s:
		run(2, func(v float64) int { return beyond(v, 2) })
	case Rule41s:
		run(4, func(v float64) int { return beyond(v, 1) })
	case Rule10x:
		run(10, func(v float64) int { return beyond(v, 0) })
	case RuleR4s:
		// Chains of consecutive values alternating across ±2 SD.
		for i := 1; i < len(z); i++ {
			a, b := beyond(z[i-1], 2), beyond(z[i], 2)
			if a == 0 || b == 0 || a == b {
				continue
			}
			if n := len(out); n > 0 && last(out[n-1].Points) == i-1 {
				out[n-1].Points = append(out[n-1].Points, i)
				continue
			}
			out = append(out, Violation{Rule: rule, Points: []int{i - 1, i}, Reject: reject})
		}
	}
	return out
}

func last(p []int) int { return p[len(p)-1] }

func sortViolations(v []Violation, order map[string]int) {
	// insertion sort: the lists are short and this keeps the sort stable
	for i := 1; i < len(v); i++ {
		for j := i; j > 0 && less(v[j], v[j-1], order); j-- {
			v[j], v[j-1] = v[j-1], v[j]
		}
	}
}

func less(a, b Violation, order map[string]int) bool {
	if a.Points[0] != b.Points[0] {
		return a.Points[0] < b.Points[0]
	}
	return order[a.Rule] < order[b.Rule]
}

// PointRules returns, for each index of a series of length n, the rules of
// the violations that involve it, in the order of Rules.
func PointRules(n int, violations []Violation) [][]string {
	out := make([][]string, n)
	for _, r := range Rules {
		for _, v := range violations {
			if v.Rule != r {
				continue
			}
			for _, p := range v.Points {
				if p >= 0 && p < n && (len(out[p]) == 0 || out[p][len(out[p])-1] != r) {
					out[p] = append(out[p], r)
				}
			}
		}
	}
	return out
}

// MinDriftBaseline is the fewest earlier approved values DriftCheck judges a
// new value against. Westgard recommends about 20 control measurements to
// set limits (from memory); 10 is this service's floor, below which the
// estimate of the SD is too loose to reject on (common practice).
const MinDriftBaseline = 10

// DriftCheck judges a new value of a curve parameter (the slope, at ingest)
// against history, the same instrument and analyte's earlier approved values
// in time order, oldest first. The baseline is the mean and SD of history;
// the series history + value is evaluated with Westgard, and the check fails
// when a reject rule's violation ends at the new value. The statistic is the
// new value's z = (value − mean)/SD, the limit 3 (the 1-3s action limit).
// With fewer than MinDriftBaseline values, or a baseline without spread, the
// check is not computed. The check is advisory unless the policy makes it
// mandatory (the caller sets Mandatory).
func DriftCheck(parameter string, history []float64, value float64) Check {
	c := Check{Name: CheckDrift, Source: "Westgard multirule (1-3s, 2-2s, R-4s, 4-1s, 10x) on the " + parameter +
		" against the mean and SD of the instrument and analyte's earlier approved curves; Westgard et al., Clin. Chem. 27 (1981) 493; limits as on a Shewhart chart (ISO 7870-2)"}
	if len(history) < MinDriftBaseline {
		c.Detail = "Not computed: " + itoa(len(history)) + " earlier approved curve(s) of this instrument and analyte; at least " +
			itoa(MinDriftBaseline) + " are needed for a baseline."
		return c
	}
	b, err := NewBaseline(history)
	if err == nil && (math.IsNaN(value) || math.IsInf(value, 0)) {
		err = inputErr("value", "not finite")
	}
	if err != nil {
		c.Detail = "Not computed: " + err.Error() + "."
		return c
	}
	series := append(append(make([]float64, 0, len(history)+1), history...), value)
	vs, _ := Westgard(series, b) // the baseline and values were checked above
	newest := len(series) - 1
	var rejects, warnings []string
	for _, v := range vs {
		if last(v.Points) != newest {
			continue
		}
		if v.Reject {
			rejects = append(rejects, v.Rule)
		} else {
			warnings = append(warnings, v.Rule)
		}
	}
	c.Computed, c.Statistic, c.Limit = true, b.Z(value), 3
	c.Passed = len(rejects) == 0
	head := "The " + parameter + " " + fmtG(value) + " is " + strings.Replace(strconv.FormatFloat(c.Statistic, 'f', 2, 64), "-", "−", 1) + " SD from the mean " + fmtG(b.Mean) +
		" (SD " + fmtG(b.SD) + ") of the " + itoa(b.N) + " earlier approved curves"
	switch {
	case !c.Passed:
		c.Detail = head + "; it violates the reject rule(s) " + strings.Join(rejects, ", ") +
			": the instrument may be drifting. Look at the trend before releasing results."
	case len(warnings) > 0:
		c.Detail = head + "; it breaches the 1-2s warning limit only, which alone does not reject."
	default:
		c.Detail = head + "; no control rule is violated."
	}
	return c
}
