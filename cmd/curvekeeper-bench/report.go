package main

import (
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
)

// target is what a scenario must reach: On ("ratio" or "service") Op
// ("<=" or ">=") Value.
type target struct {
	On    string
	Op    string
	Value float64
}

func (t target) String() string {
	if t.On == "" {
		return "none"
	}
	return t.On + t.Op + strconv.FormatFloat(t.Value, 'g', -1, 64)
}

// met reports whether the line reaches its target.
func (t target) met(service, ratio float64) bool {
	v := ratio
	if t.On == "service" {
		v = service
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return false
	}
	if t.Op == "<=" {
		return v <= t.Value
	}
	return v >= t.Value
}

// line is one scenario's result: the service's figure, the baseline's
// figure measured in the same run, and extra key=value pairs (percentiles).
type line struct {
	Scenario string
	Service  float64
	Baseline float64
	Target   target
	Unit     string
	Extra    []string // "key=value" pairs, in order
}

func (l line) ratio() float64 {
	if l.Baseline == 0 {
		return math.NaN()
	}
	return l.Service / l.Baseline
}

// String renders l as one logfmt line.
func (l line) String() string {
	r := l.ratio()
	met := "no"
	switch {
	case l.Target.On == "": // a line shown for comparison, with no target
		met = "n/a"
	case l.Target.met(l.Service, r):
		met = "yes"
	}
	parts := []string{
		"scenario=" + l.Scenario,
		"service=" + num(l.Service),
		"baseline=" + num(l.Baseline),
		"ratio=" + num(r),
		"target=" + l.Target.String(),
		"unit=" + l.Unit,
		"met=" + met,
	}
	return strings.Join(append(parts, l.Extra...), " ")
}

// kv renders one extra pair, quoting a value logfmt would split.
func kv(key string, v any) string {
	var s string
	switch x := v.(type) {
	case float64:
		s = num(x)
	case int:
		s = strconv.Itoa(x)
	default:
		s = fmt.Sprint(x)
	}
	if strings.ContainsAny(s, " \"=") {
		s = strconv.Quote(s)
	}
	return key + "=" + s
}

// latencies are the p50, p90 and p99 pairs of a result, prefixed.
func latencies(prefix string, r result) []string {
	return []string{
		kv(prefix+"p50_ms", r.percentile(0.50)),
		kv(prefix+"p90_ms", r.percentile(0.90)),
		kv(prefix+"p99_ms", r.percentile(0.99)),
	}
}

// num formats a figure with four significant digits and no exponent.
func num(v float64) string {
	switch {
	case math.IsNaN(v) || math.IsInf(v, 0):
		return "NaN"
	case math.Abs(v) >= 1000:
		return strconv.FormatFloat(v, 'f', 0, 64)
	case v == 0:
		return "0"
	}
	digits := 3 - int(math.Floor(math.Log10(math.Abs(v))))
	return strconv.FormatFloat(v, 'f', max(0, digits), 64)
}

// skipped prints why a scenario did not run.
func skipped(w io.Writer, scenario, why string) {
	fmt.Fprintf(w, "scenario=%s skipped=yes reason=%q\n", scenario, why)
}
