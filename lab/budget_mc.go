package lab

// Monte Carlo by default where the GUM framework is in doubt (JCGM 101):
// which results are screened, the seed that makes each reproduce, and the
// coverage interval a result then reports.

import (
	"hash/fnv"
	"math"
	"strconv"

	"curvekeeper/calib"
)

// Settings of UncertaintySpec.MonteCarlo.
const (
	MonteCarloAuto      = "auto"       // the default: a check runs by itself where the GUM framework is in doubt
	MonteCarloOnRequest = "on_request" // only when a prediction asks for it
)

// Triggers of a Monte Carlo check (MonteCarloOut.Trigger).
const (
	MCTriggerRequested = "requested" // a prediction asked for it
	MCTriggerScreened  = "screened"  // calib.ScreenGUM put the GUM framework in doubt
)

// Methods of a reported coverage interval (ReportedIntervalOut.Method).
const (
	ReportedGUM        = "gum"         // y ± U, validated by the Monte Carlo check
	ReportedMonteCarlo = "monte_carlo" // the Monte Carlo interval: y ± U was not validated
)

// ReportedIntervalOut is the coverage interval a result reports once a
// Monte Carlo check ran: y ± U when the check validated it (JCGM 101 §8.2),
// else the probabilistically symmetric Monte Carlo interval (§7.7.1), its
// ends written to the decimal place of U. The GUM figures stay beside it.
type ReportedIntervalOut struct {
	Method   string  `json:"method"`
	Level    float64 `json:"level"`
	Low      float64 `json:"low"`
	High     float64 `json:"high"`
	LowText  string  `json:"low_text"`
	HighText string  `json:"high_text"`
	Reason   string  `json:"reason"`
}

// autoMonteCarlo returns the Monte Carlo check the spec asks for by itself
// for a result predicted as pr: nil unless the spec is bottom-up with
// MonteCarloAuto and calib.ScreenGUM puts the result in doubt; the seed is
// budgetSeed's, the draws calib's default (at least 10⁵).
func autoMonteCarlo(rep *calib.Report, pr calib.Prediction, responses []float64, dilution float64, spec *UncertaintySpec) *MCRequest {
	if !screensResults(spec) {
		return nil
	}
	sc := rep.ScreenGUM(pr)
	if !sc.InDoubt {
		return nil
	}
	return &MCRequest{Seed: budgetSeed(rep, responses, dilution), Screen: sc.Reason}
}

// screensResults reports whether spec runs Monte Carlo by itself where the
// GUM framework is in doubt.
func screensResults(spec *UncertaintySpec) bool {
	return spec.MonteCarlo != MonteCarloOnRequest && (spec.Approach == "" || spec.Approach == ApproachBottomUp)
}

// budgetSeed is the seed of a result's automatic Monte Carlo check: FNV-1a
// (64 bits) of the curve's coefficients, residual SD and degrees of
// freedom and of the sample's readings and dilution, top bit cleared, so
// that the same result against the same curve draws the same numbers.
func budgetSeed(rep *calib.Report, responses []float64, dilution float64) uint64 {
	h := fnv.New64a()
	var b [8]byte
	put := func(v float64) {
		bits := math.Float64bits(v)
		for i := range b {
			b[i] = byte(bits >> (8 * i))
		}
		h.Write(b[:])
	}
	for _, c := range rep.Coefficients {
		put(c)
	}
	put(rep.ResidualSD)
	put(float64(rep.DF))
	for _, y := range responses {
		put(y)
	}
	put(dilution)
	return h.Sum64() &^ (1 << 63)
}

// reportedInterval is the interval a result reports after the Monte Carlo
// check m of the GUM budget b.
func reportedInterval(m *MonteCarloOut, b *calib.Budget) *ReportedIntervalOut {
	d := b.Decimals
	if b.ExpandedExact == 0 {
		d = -1
	}
	text := func(v float64) string { return strconv.FormatFloat(v, 'f', d, 64) }
	if m.Agrees {
		lo, hi := b.ValueRounded-b.Expanded, b.ValueRounded+b.Expanded
		return &ReportedIntervalOut{Method: ReportedGUM, Level: b.Level, Low: lo, High: hi, LowText: text(lo), HighText: text(hi),
			Reason: "The Monte Carlo check validated y ± U at two significant digits of u_c (JCGM 101 §8.2)."}
	}
	return &ReportedIntervalOut{Method: ReportedMonteCarlo, Level: m.Level, Low: m.Low, High: m.High, LowText: text(m.Low), HighText: text(m.High),
		Reason: "y ± U differs from the Monte Carlo interval by more than the numerical tolerance (JCGM 101 §8.2): the GUM linearisation does not hold here, so the Monte Carlo interval is reported."}
}

// IntervalStatement words the conformity statement of a result that
// reports the Monte Carlo interval ri.
func IntervalStatement(c calib.Conformity, value string, ri *ReportedIntervalOut) string {
	pct := strconv.FormatFloat(100*ri.Level, 'f', -1, 64)
	return "Result " + value + " (Monte Carlo " + pct + " % coverage interval " + ri.LowText + " to " + ri.HighText + ")" +
		StatementMiddle(c.Spec, c.Rule) + c.Outcome + "."
}
