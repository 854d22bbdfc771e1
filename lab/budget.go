package lab

import (
	"context"
	"encoding/json"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"curvekeeper/calib"
)

// Uncertainty terms a method may choose for an analyte's results.
const (
	TermCalibration   = "calibration"   // s(x̂0) of the inverse prediction (linear and non-linear)
	TermStandards     = "standards"     // the run's standard materials: certificate and preparation
	TermPreparation   = "preparation"   // the method's dilution and preparation volumes, as rectangular tolerances
	TermRepeatability = "repeatability" // the scatter of the sample's own replicate readings
	TermRecovery      = "recovery"      // the method's recovery, uncorrected
)

// BudgetTerms lists the terms a method may choose.
var BudgetTerms = []string{TermCalibration, TermStandards, TermPreparation, TermRepeatability, TermRecovery}

// Approaches to the uncertainty a result reports.
const (
	ApproachBottomUp = "bottom_up" // the GUM budget of the chosen terms
	ApproachTopDown  = "top_down"  // the method's top-down relative u (within-lab reproducibility and bias), k = 2
	ApproachLarger   = "larger"    // whichever of the two gives the larger U
)

// UncertaintySpec is how a method states the uncertainty and the conformity
// of an analyte's results. Stored in the method's analytes JSON.
type UncertaintySpec struct {
	// Terms the budget holds, from BudgetTerms; the calibration term is
	// always the result's value and is implied.
	Terms []string `json:"terms"`
	// Preparation lists the method's preparation steps of a sample (each an
	// aliquot made up to a volume with their tolerances); each volume
	// enters as a rectangular relative term a/(√3·V).
	Preparation []PrepStep `json:"preparation,omitempty"`
	// Recovery is the method's mean recovery with its standard uncertainty
	// and degrees of freedom (0: infinite); results are not corrected for
	// it, so it enters as a factor 1 with relative u = u/R̄.
	Recovery *RecoverySpec `json:"recovery,omitempty"`
	// Coverage is calib.CoverageStudentT (the default) or calib.CoverageK2.
	Coverage string `json:"coverage,omitempty"`
	// Approach is ApproachBottomUp (the default), ApproachTopDown or
	// ApproachLarger; the last two need TopDownRelative, or TopDownSource
	// TopDownSourceHistory.
	Approach string `json:"approach,omitempty"`
	// MonteCarlo is MonteCarloAuto (the default: a Monte Carlo check runs
	// by itself where ScreenGUM puts the GUM framework in doubt) or
	// MonteCarloOnRequest (only when a prediction asks for it).
	MonteCarlo string `json:"monte_carlo,omitempty"`
	// TopDownRelative is the relative standard uncertainty u_c/|y| of the
	// lab's top-down estimate (calib.ComputeTopDown: within-lab
	// reproducibility and bias, ISO 11352), used with k = 2. With the
	// history as source it is the fallback while the history is too short.
	TopDownRelative float64 `json:"top_down_relative,omitempty"`
	// TopDownSource is TopDownSourceStated (the default: TopDownRelative) or
	// TopDownSourceHistory: the estimate from the stored QC history of the
	// method's analyte (Service.HistoryTopDown) when the result is
	// computed. While the history is too short, a result takes
	// TopDownRelative when the spec states one, else the bottom-up budget;
	// a note says which and why.
	TopDownSource string `json:"top_down_source,omitempty"`
	// Limits, when set, are the specification limits a result's conformity
	// is stated against, with the decision rule.
	Limits *SpecLimits `json:"limits,omitempty"`
}

// RecoverySpec is a method's recovery R̄ with its standard uncertainty.
type RecoverySpec struct {
	Mean           float64 `json:"mean"`
	StdUncertainty float64 `json:"std_uncertainty"`
	DF             float64 `json:"df,omitempty"`
}

// SpecLimits are specification limits in the analyte's unit and the
// decision rule (calib.RuleSimple or calib.RuleGuardBand).
type SpecLimits struct {
	Lower *float64 `json:"lower,omitempty"`
	Upper *float64 `json:"upper,omitempty"`
	Rule  string   `json:"rule"`
}

// checkUncertaintySpec refuses a spec that breaks a rule; p points at it.
func checkUncertaintySpec(p string, u *UncertaintySpec) error {
	if u == nil {
		return nil
	}
	seen := map[string]bool{}
	for i, t := range u.Terms {
		if !slices.Contains(BudgetTerms, t) {
			return FieldError(p+Pointer("terms", i), "unknown term %q; one of %s", t, strings.Join(BudgetTerms, ", "))
		}
		if seen[t] {
			return FieldError(p+Pointer("terms", i), "term %q is listed twice", t)
		}
		seen[t] = true
	}
	if seen[TermPreparation] != (len(u.Preparation) > 0) {
		return FieldError(p+"/preparation", "the preparation term and its steps come together")
	}
	for i, st := range u.Preparation {
		for _, v := range []struct{ name, vol, tol string }{{"aliquot", "aliquot_ml", "aliquot_tol_ml"}, {"final", "final_ml", "final_tol_ml"}} {
			vol, tol := st.AliquotML, st.AliquotTolML
			if v.name == "final" {
				vol, tol = st.FinalML, st.FinalTolML
			}
			if !calib.Finite(vol) || vol <= 0 {
				return FieldError(p+Pointer("preparation", i, v.vol), "volume must be a finite number > 0")
			}
			if !calib.Finite(tol) || tol < 0 || tol >= vol {
				return FieldError(p+Pointer("preparation", i, v.tol), "tolerance must be ≥ 0 and below the volume")
			}
		}
	}
	if seen[TermRecovery] != (u.Recovery != nil) {
		return FieldError(p+"/recovery", "the recovery term and its recovery come together")
	}
	if r := u.Recovery; r != nil {
		if !calib.Finite(r.Mean) || r.Mean <= 0 || !calib.Finite(r.StdUncertainty) || r.StdUncertainty < 0 {
			return FieldError(p+"/recovery", "recovery mean must be > 0 and its std_uncertainty ≥ 0, both finite")
		}
		if !calib.Finite(r.DF) || (r.DF != 0 && r.DF < 1) {
			return FieldError(p+"/recovery/df", "degrees of freedom must be ≥ 1, or 0 for infinite")
		}
	}
	if u.Coverage != "" && u.Coverage != string(calib.CoverageStudentT) && u.Coverage != string(calib.CoverageK2) {
		return FieldError(p+"/coverage", "coverage is student_t or k2")
	}
	if u.MonteCarlo != "" && u.MonteCarlo != MonteCarloAuto && u.MonteCarlo != MonteCarloOnRequest {
		return FieldError(p+"/monte_carlo", "monte_carlo is %s or %s", MonteCarloAuto, MonteCarloOnRequest)
	}
	switch u.Approach {
	case "", ApproachBottomUp:
	case ApproachTopDown, ApproachLarger:
		if u.TopDownSource == TopDownSourceHistory && u.TopDownRelative == 0 {
			break // the fallback is the bottom-up budget
		}
		if !calib.Finite(u.TopDownRelative) || u.TopDownRelative <= 0 {
			return FieldError(p+"/top_down_relative", "the %s approach needs top_down_relative > 0 (or top_down_source history)", u.Approach)
		}
	default:
		return FieldError(p+"/approach", "approach is bottom_up, top_down or larger")
	}
	if u.TopDownSource != "" && u.TopDownSource != TopDownSourceStated && u.TopDownSource != TopDownSourceHistory {
		return FieldError(p+"/top_down_source", "top_down_source is %s or %s", TopDownSourceStated, TopDownSourceHistory)
	}
	if l := u.Limits; l != nil {
		if l.Lower == nil && l.Upper == nil {
			return FieldError(p+"/limits", "give a lower or an upper limit")
		}
		if l.Lower != nil && l.Upper != nil && *l.Lower > *l.Upper {
			return FieldError(p+"/limits/lower", "lower limit above upper limit")
		}
		for _, v := range []*float64{l.Lower, l.Upper} {
			if v != nil && !calib.Finite(*v) {
				return FieldError(p+"/limits", "limits must be finite numbers")
			}
		}
		if l.Rule != string(calib.RuleSimple) && l.Rule != string(calib.RuleGuardBand) {
			return FieldError(p+"/limits/rule", "rule is %s or %s", calib.RuleSimple, calib.RuleGuardBand)
		}
	}
	return nil
}

// StandardsTerm is what the standard materials a run named for one analyte
// add to its results: the largest relative standard uncertainty among them
// (each already combines its stock's certificate and its own preparation),
// taken as one term fully correlated with everything prepared from the same
// stock. Every level shares the stock, so a common error of the stock
// scales every level, and x̂0, by the same factor; the independent part of
// each level's preparation is partly seen by s(y/x) already, so the largest
// is a conservative choice.
type StandardsTerm struct {
	Code     string  // the material with the largest relative uncertainty
	Stock    string  // the root of its lineage (its correlation group)
	Relative float64 // u_rel
	// Name and Group are the budget term's, made once per curve.
	Name, Group string
}

// StandardsTermOf returns the standards' term of analyte from the run's
// materials codes and their lineage; nil when none is of analyte.
func StandardsTermOf(analyte string, codes []string, lineage map[string]*Material) *StandardsTerm {
	var out *StandardsTerm
	for _, c := range codes {
		m := lineage[c]
		if m == nil || m.Analyte != analyte {
			continue
		}
		if out == nil || m.RelativeUncertainty > out.Relative {
			root := m
			for seen := 0; root.PreparedFrom != "" && lineage[root.PreparedFrom] != nil && seen < 32; seen++ {
				root = lineage[root.PreparedFrom]
			}
			out = &StandardsTerm{Code: m.Code, Stock: root.Code, Relative: m.RelativeUncertainty,
				Name: "standards: " + m.Code, Group: "stock:" + root.Code}
		}
	}
	return out
}

// BudgetContext is what a result's budget needs beyond its curve and
// readings: the analyte's spec, its unit and the standards' term.
type BudgetContext struct {
	Spec      *UncertaintySpec
	Unit      string
	Standards *StandardsTerm
	// MonteCarlo, set for one request, adds the Monte Carlo check.
	MonteCarlo *MCRequest
	// History is the top-down estimate from the QC history when the spec's
	// TopDownSource is TopDownSourceHistory; HistoryGap says why it is nil then.
	History    *TopDownEstimate
	HistoryGap string
}

// MCRequest asks for a Monte Carlo check of a budget (JCGM 101).
type MCRequest struct {
	Draws int // 0: calib's default (at least 10⁵)
	Seed  uint64
	// Screen is why the check runs by itself (ScreenGUM's reason); empty
	// when a request asked for it.
	Screen string
}

// BudgetRecord is a result's uncertainty budget and conformity statement as
// it is stored (JSON in sample_results.uncertainty) and answered.
type BudgetRecord struct {
	Approach         string          `json:"approach"`
	Value            float64         `json:"value"`
	ValueText        string          `json:"value_text"`
	Unit             string          `json:"unit"`
	Combined         float64         `json:"combined"`
	RelativeCombined *float64        `json:"relative_combined"`
	EffectiveDF      *float64        `json:"effective_df"` // null: infinite
	Coverage         string          `json:"coverage"`
	Level            float64         `json:"level"`
	CoverageFactor   float64         `json:"coverage_factor"`
	Expanded         float64         `json:"expanded"`
	ExpandedText     string          `json:"expanded_text"`
	Terms            []BudgetTermOut `json:"terms"`
	TopDown          *TopDownOut     `json:"top_down,omitempty"`
	MonteCarlo       *MonteCarloOut  `json:"monte_carlo,omitempty"`
	// ReportedInterval, set when a Monte Carlo check ran, says which
	// coverage interval the result reports (absent: y ± U).
	ReportedInterval *ReportedIntervalOut `json:"reported_interval,omitempty"`
	Conformity       *ConformityOut       `json:"conformity,omitempty"`
	Notes            []string             `json:"notes"`
	Cautions         []string             `json:"cautions"`
}

// BudgetTermOut is one term of a budget with its share of u_c².
type BudgetTermOut struct {
	Name           string   `json:"name"`
	Source         string   `json:"source"`
	Distribution   string   `json:"distribution"`
	Value          float64  `json:"value"`
	StdUncertainty float64  `json:"std_uncertainty"`
	Relative       *float64 `json:"relative"`
	Coefficient    float64  `json:"coefficient"`
	Contribution   float64  `json:"contribution"`
	Share          float64  `json:"share"`
	DF             *float64 `json:"df"` // null: infinite
	Group          string   `json:"group,omitempty"`
}

// TopDownOut is the top-down alternative the approach weighed.
type TopDownOut struct {
	Relative     float64 `json:"relative"`
	Combined     float64 `json:"combined"`
	Expanded     float64 `json:"expanded"`
	ExpandedText string  `json:"expanded_text"`
	// Source is TopDownSourceStated or TopDownSourceHistory (absent in records made
	// before the history existed: stated).
	Source  string                `json:"source,omitempty"`
	History *TopDownProvenanceOut `json:"history,omitempty"`
}

// TopDownProvenanceOut names the history a top-down estimate came from.
type TopDownProvenanceOut struct {
	From     time.Time `json:"from"`
	To       time.Time `json:"to"`
	QCCount  int       `json:"recoveries"`
	CRMCount int       `json:"reference_results"`
}

// MonteCarloOut is the Monte Carlo check beside the GUM budget (bottom-up).
type MonteCarloOut struct {
	Draws     int     `json:"draws"`
	Discarded int     `json:"discarded"`
	Seed      uint64  `json:"seed"`
	Level     float64 `json:"level"`
	Mean      float64 `json:"mean"`
	SD        float64 `json:"sd"`
	Low       float64 `json:"low"`
	High      float64 `json:"high"`
	ShortLow  float64 `json:"short_low"`
	ShortHigh float64 `json:"short_high"`
	GUMLow    float64 `json:"gum_low"`
	GUMHigh   float64 `json:"gum_high"`
	Tolerance float64 `json:"tolerance"`
	Agrees    bool    `json:"agrees"`
	// Trigger is MCTriggerRequested or MCTriggerScreened; Screen the
	// screen's reason for the latter.
	Trigger string `json:"trigger,omitempty"`
	Screen  string `json:"screen,omitempty"`
}

// ConformityOut is the statement of conformity of a result.
type ConformityOut struct {
	Rule       string   `json:"rule"`
	Lower      *float64 `json:"lower"`
	Upper      *float64 `json:"upper"`
	Unit       string   `json:"unit"`
	AcceptLow  *float64 `json:"accept_low"`
	AcceptHigh *float64 `json:"accept_high"`
	Outcome    string   `json:"outcome"`
	Accepted   bool     `json:"accepted"`
	Risk       string   `json:"risk"`
	Statement  string   `json:"statement"`
}

// Conformity returns the calib statement the record was made from.
func (c *ConformityOut) Conformity(value, expanded float64) calib.Conformity {
	spec := calib.Specification{Unit: c.Unit}
	if c.Lower != nil {
		spec.Lower, spec.HasLower = *c.Lower, true
	}
	if c.Upper != nil {
		spec.Upper, spec.HasUpper = *c.Upper, true
	}
	return calib.Conformity{Rule: calib.DecisionRule(c.Rule), Spec: spec, Result: value, Expanded: expanded,
		Outcome: c.Outcome, Accepted: c.Accepted, Risk: c.Risk}
}

func finiteOrNil(v float64) *float64 {
	if !calib.Finite(v) {
		return nil
	}
	return &v
}

// ResultBudget computes the budget of a result predicted as pr from the
// curve report rep, its readings (responses, dilution) and bc, by the GUM
// (calib.ComputeBudget, product model):
//
//	y = x̂0 · Π f_j,  every f_j a factor 1 with relative u:
//	calibration  u(x̂0) = s(x̂0), ν = n − p of the fit
//	standards    u_rel of the run's materials (StandardsTerm), normal, ν = ∞
//	preparation  a/(√3·V) per volume of the method's steps, rectangular
//	repeatability (s/x̄)/√m of the readings inverted one by one, ν = m − 1
//	recovery     u(R̄)/R̄, uncorrected
//
// then the approach, the coverage, and the conformity with the method's
// limits (calib.Decide with U as reported). nil without a spec, and for a
// result without a single non-zero concentration (its flags say why) or
// whose terms the engine refuses.
func ResultBudget(rep *calib.Report, pr calib.Prediction, responses []float64, dilution float64, bc BudgetContext) (*BudgetRecord, error) {
	spec := bc.Spec
	if spec == nil {
		return nil, nil
	}
	rec := &BudgetRecord{Approach: spec.Approach, Unit: bc.Unit, Terms: []BudgetTermOut{}, Notes: []string{}}
	if rec.Approach == "" {
		rec.Approach = ApproachBottomUp
	}
	cal, err := rep.CalibrationTermOf(calibrationTermName, pr)
	if err != nil || pr.Concentration == 0 {
		return nil, nil // no single non-zero concentration: nothing to state U of (the flags say why)
	}
	terms := make([]calib.UncertaintyTerm, 1, 1+len(spec.Terms)+2*len(spec.Preparation))
	terms[0] = cal
	in := calib.BudgetInput{Model: calib.ModelProduct, Coverage: calib.Coverage(spec.Coverage), Terms: terms}
	for _, t := range spec.Terms {
		switch t {
		case TermStandards:
			if bc.Standards == nil {
				rec.Notes = append(rec.Notes, noteNoStandards)
				continue
			}
			in.Terms = append(in.Terms, bc.Standards.term())
		case TermPreparation:
			in.Terms = appendPreparationTerms(in.Terms, spec.Preparation)
		case TermRepeatability:
			rt, note := repeatabilityTerm(rep, responses, dilution)
			if note != "" {
				rec.Notes = append(rec.Notes, note)
				continue
			}
			in.Terms = append(in.Terms, rt)
		case TermRecovery:
			in.Terms = append(in.Terms, spec.Recovery.term())
		}
	}
	b, err := calib.ComputeBudget(in)
	if err != nil {
		return nil, nil // e.g. a negative x̂0 with a factor model: the result states no budget
	}
	rec.fill(b)
	rec.Terms = termsOut(b.Terms)
	mc := bc.MonteCarlo
	if mc == nil {
		mc = autoMonteCarlo(rep, pr, responses, dilution, spec)
	}
	if mc != nil {
		if err := rec.addMonteCarlo(in, &b, *mc); err != nil {
			return nil, err
		}
	}
	rel, tdOut := topDownOf(rec, spec, bc)
	if rec.Approach != ApproachBottomUp {
		td, err := calib.ComputeBudget(calib.BudgetInput{Model: calib.ModelSum, Coverage: calib.CoverageK2,
			Terms: []calib.UncertaintyTerm{{Name: "top-down", Value: b.Value, StdUncertainty: rel * math.Abs(b.Value)}}})
		if err != nil {
			return nil, err
		}
		tdOut.Relative, tdOut.Combined, tdOut.Expanded, tdOut.ExpandedText = rel, td.Combined, td.Expanded, td.ExpandedText
		rec.TopDown = &tdOut
		if rec.Approach == ApproachTopDown || td.ExpandedExact > b.ExpandedExact {
			rec.fill(td)
			rec.ReportedInterval = nil
			rec.Notes = append(rec.Notes, "U is the top-down estimate (k = 2); the bottom-up terms are shown for reference.")
		}
	}
	if l := spec.Limits; l != nil {
		s := l.specification(bc.Unit)
		if ri := rec.ReportedInterval; ri != nil && ri.Method == ReportedMonteCarlo {
			c, err := calib.DecideInterval(rec.Value, ri.Low, ri.High, s, calib.DecisionRule(l.Rule))
			if err != nil {
				return nil, err
			}
			rec.Conformity = conformityOut(l, bc.Unit, c, rec.ValueText, rec.ExpandedText)
			rec.Conformity.Statement = IntervalStatement(c, rec.ValueText, ri)
		} else {
			c, err := calib.Decide(rec.Value, rec.Expanded, s, calib.DecisionRule(l.Rule))
			if err != nil {
				return nil, err
			}
			rec.Conformity = conformityOut(l, bc.Unit, c, rec.ValueText, rec.ExpandedText)
		}
	}
	return rec, nil
}

// topDownOf returns the relative u of the top-down estimate a result under
// spec takes and its source: the history's estimate (bc.History), or while
// there is none the stated TopDownRelative, else none, in which case the
// record's approach falls back to bottom-up; a note says so.
func topDownOf(rec *BudgetRecord, spec *UncertaintySpec, bc BudgetContext) (float64, TopDownOut) {
	if rec.Approach == ApproachBottomUp || spec.TopDownSource != TopDownSourceHistory {
		return spec.TopDownRelative, TopDownOut{Source: TopDownSourceStated}
	}
	if h := bc.History; h != nil {
		return h.Relative(), TopDownOut{Source: TopDownSourceHistory, History: &TopDownProvenanceOut{From: h.From, To: h.To,
			QCCount: h.Estimate.QCCount, CRMCount: h.Estimate.CRMCount}}
	}
	why := bc.HistoryGap
	if why == "" {
		why = "no history was read"
	}
	if spec.TopDownRelative > 0 {
		rec.Notes = append(rec.Notes, "The QC history gives no top-down estimate yet ("+why+"): the method's stated top_down_relative is used instead.")
		return spec.TopDownRelative, TopDownOut{Source: TopDownSourceStated}
	}
	rec.Notes = append(rec.Notes, "The QC history gives no top-down estimate yet ("+why+"): U is the bottom-up budget.")
	rec.Approach = ApproachBottomUp
	return 0, TopDownOut{}
}

const (
	calibrationTermName   = "calibration: s(x̂0) from the curve"
	repeatabilityTermName = "repeatability of the sample's readings"
	noteNoStandards       = "The method asks for the standards' term, but the run named no standard material of this analyte: the term is left out."
	noteOneReading        = "The method asks for the repeatability term, but the sample has one reading: the term is left out."
	noteNoReadingEstimate = "A single reading of the sample gives no concentration: the repeatability term is left out."
)

// term is the standards' term of a budget: a factor 1 with the materials'
// relative u, normal, in the stock's correlation group.
func (st *StandardsTerm) term() calib.UncertaintyTerm {
	return calib.UncertaintyTerm{Name: st.Name, Source: calib.SourceStandard, Kind: calib.DistNormal, Value: 1,
		StdUncertainty: st.Relative, Group: st.Group}
}

// appendPreparationTerms appends the terms of the method's preparation
// steps: each volume a factor 1 with the rectangular relative u a/(√3·V).
func appendPreparationTerms(dst []calib.UncertaintyTerm, steps []PrepStep) []calib.UncertaintyTerm {
	for i, st := range steps {
		n := "preparation step " + strconv.Itoa(i+1)
		dst = append(dst,
			calib.RectangularTerm(n+" aliquot", calib.SourcePreparation, 1, st.AliquotTolML/st.AliquotML),
			calib.RectangularTerm(n+" final volume", calib.SourcePreparation, 1, st.FinalTolML/st.FinalML))
	}
	return dst
}

// repeatabilityTerm is the repeatability term of the readings, each
// inverted on its own; or, when there is none, the note that says why.
func repeatabilityTerm(rep *calib.Report, responses []float64, dilution float64) (calib.UncertaintyTerm, string) {
	if len(responses) < 2 {
		return calib.UncertaintyTerm{}, noteOneReading
	}
	xs := make([]float64, 0, len(responses))
	for _, y := range responses {
		p, err := rep.Predict([]float64{y}, dilution, 0)
		if err != nil || !p.HasEstimate() {
			break
		}
		xs = append(xs, p.Concentration)
	}
	rt, err := calib.RepeatabilityFactor(repeatabilityTermName, xs)
	if len(xs) < len(responses) || err != nil {
		return calib.UncertaintyTerm{}, noteNoReadingEstimate
	}
	return rt, ""
}

// term is the recovery term of a result not corrected for recovery.
func (r *RecoverySpec) term() calib.UncertaintyTerm {
	return calib.RecoveryTerm("recovery (uncorrected)", r.Mean, r.StdUncertainty, r.DF, false)
}

// specification is the calib form of the limits, in unit.
func (l *SpecLimits) specification(unit string) calib.Specification {
	s := calib.Specification{Unit: unit}
	if l.Lower != nil {
		s.Lower, s.HasLower = *l.Lower, true
	}
	if l.Upper != nil {
		s.Upper, s.HasUpper = *l.Upper, true
	}
	return s
}

// termsOut returns the record's form of a budget's terms.
func termsOut(ts []calib.TermResult) []BudgetTermOut {
	// The terms' optional numbers point into one array, not one allocation each.
	nums := make([]float64, 2*len(ts))
	ptr := func(k int, v float64) *float64 {
		if !calib.Finite(v) {
			return nil
		}
		nums[k] = v
		return &nums[k]
	}
	out := make([]BudgetTermOut, len(ts))
	for i, t := range ts {
		out[i] = BudgetTermOut{Name: t.Name, Source: string(t.Source), Distribution: string(t.Kind),
			Value: t.Value, StdUncertainty: t.StdUncertainty, Relative: ptr(2*i, t.Relative), Coefficient: t.Coefficient,
			Contribution: t.Contribution, Share: t.Share, DF: ptr(2*i+1, t.DF), Group: t.Group}
	}
	return out
}

// conformityOut returns the record's form of the conformity c with the
// limits l in unit, of the result and U as texts.
func conformityOut(l *SpecLimits, unit string, c calib.Conformity, value, expanded string) *ConformityOut {
	return &ConformityOut{Rule: l.Rule, Lower: l.Lower, Upper: l.Upper, Unit: unit,
		AcceptLow: finiteOrNil(c.AcceptLow), AcceptHigh: finiteOrNil(c.AcceptHigh), Outcome: c.Outcome,
		Accepted: c.Accepted, Risk: c.Risk, Statement: ConformityStatement(c, value, expanded)}
}

// fill sets the record's reported figures from b.
func (r *BudgetRecord) fill(b calib.Budget) {
	r.Value, r.ValueText, r.Combined = b.Value, b.ValueText, b.Combined
	r.RelativeCombined, r.EffectiveDF = finiteOrNil(b.RelativeCombined), finiteOrNil(b.EffectiveDF)
	r.Coverage, r.Level, r.CoverageFactor = string(b.Coverage), b.Level, b.CoverageFactor
	r.Expanded, r.ExpandedText = b.Expanded, b.ExpandedText
}

// ConformityStatement words a conformity statement: the result with its U,
// the limits, the rule and the outcome (the risk is worded apart, in Risk).
func ConformityStatement(c calib.Conformity, value, expanded string) string {
	return "Result " + value + " ± " + expanded + StatementMiddle(c.Spec, c.Rule) + c.Outcome + "."
}

// StatementMiddle is the part of a conformity statement between U and the
// outcome: the unit, the limits and the rule.
func StatementMiddle(spec calib.Specification, rule calib.DecisionRule) string {
	lim := make([]string, 0, 2)
	if spec.HasLower {
		lim = append(lim, "lower limit "+strconv.FormatFloat(spec.Lower, 'g', -1, 64)+" "+spec.Unit)
	}
	if spec.HasUpper {
		lim = append(lim, "upper limit "+strconv.FormatFloat(spec.Upper, 'g', -1, 64)+" "+spec.Unit)
	}
	r := "simple acceptance"
	if rule == calib.RuleGuardBand {
		r = "guard band w = U"
	}
	return " " + spec.Unit + " against the " + strings.Join(lim, " and ") + " under " + r + ": "
}

// addMonteCarlo adds the Monte Carlo check (JCGM 101) of the bottom-up
// budget b of input in to r: the symmetric and shortest coverage intervals
// beside y ± U and the JCGM 101 §8.2 comparison at two significant digits.
func (r *BudgetRecord) addMonteCarlo(in calib.BudgetInput, b *calib.Budget, req MCRequest) error {
	mc, err := calib.MonteCarlo(in, calib.MCOptions{Draws: req.Draws, Seed: req.Seed})
	if err != nil {
		return err
	}
	out := &MonteCarloOut{Draws: mc.Draws, Discarded: mc.Discarded, Seed: mc.Seed, Level: mc.Level, Mean: mc.Mean, SD: mc.SD,
		Low: mc.Low, High: mc.High, ShortLow: mc.ShortLow, ShortHigh: mc.ShortHigh, Trigger: MCTriggerRequested}
	if req.Screen != "" {
		out.Trigger, out.Screen = MCTriggerScreened, req.Screen
	}
	if chk, err := calib.CompareGUMMC(*b, mc, 2); err == nil {
		out.GUMLow, out.GUMHigh, out.Tolerance, out.Agrees = chk.GUMLow, chk.GUMHigh, chk.Delta, chk.Agree
	}
	r.MonteCarlo = out
	if mc.Unbounded {
		// Beyond an asymptote the model has no value: there is no
		// coverage interval to report at this level, and y ± U is not
		// validated either.
		out.Agrees = false
		r.Notes = append(r.Notes, "More than (1 − p)/2 of the Monte Carlo draws give no concentration (the response lies near the curve's asymptote): no coverage interval can be stated at this level, and y ± U is not validated; a qualified person decides whether the result is reported.")
		return nil
	}
	r.ReportedInterval = reportedInterval(out, b)
	if !out.Agrees {
		r.Notes = append(r.Notes, "The Monte Carlo interval and y ± U differ by more than the numerical tolerance: the Monte Carlo interval is the better statement here (JCGM 101 §8.2).")
	}
	return nil
}

// JSON returns the record's JSON, nil for a nil record.
func (r *BudgetRecord) JSON() ([]byte, error) {
	if r == nil {
		return nil, nil
	}
	return json.Marshal(r)
}

// BudgetContext returns what the budget of a result against c needs.
func (c *CurveInput) BudgetContext() BudgetContext {
	return BudgetContext{Spec: c.Rules.Uncertainty, Unit: c.Unit, Standards: c.Standards, History: c.History, HistoryGap: c.HistoryGap}
}

// ResultBudgetJSON is the stored budget (JSON) of a result of readings
// responses at dilution against the new curve c; nil when c's analyte has
// no uncertainty spec.
func ResultBudgetJSON(c *CurveInput, responses []float64, dilution float64) ([]byte, error) {
	return BudgetJSON(c.Report, responses, dilution, c.BudgetContext())
}

// BudgetJSON is the stored budget (JSON, with the cautions) of a result of
// readings responses at dilution against the curve report rep; nil when bc
// has no spec or the curve gives no prediction (Quantify then flags the
// result).
func BudgetJSON(rep *calib.Report, responses []float64, dilution float64, bc BudgetContext) ([]byte, error) {
	if bc.Spec == nil || rep == nil || len(rep.Coefficients) == 0 {
		return nil, nil
	}
	pr, err := rep.Predict(responses, dilution, 0)
	if err != nil {
		return nil, nil
	}
	rec, err := ResultBudget(rep, pr, responses, dilution, bc)
	if err != nil || rec == nil {
		return nil, err
	}
	rec.Cautions = calib.Cautions()
	return rec.JSON()
}

// CurveBudgetContext returns what a prediction against curve c needs for
// its budget: the spec of c's analyte in c's method revision and, when the
// spec asks for it, the standards' term of the materials c's run named.
// Method revisions, runs and materials never change, so the answer may be
// kept for the curve.
func (s *Service) CurveBudgetContext(ctx context.Context, c *Curve) (BudgetContext, error) {
	m, err := s.GetMethodRevision(ctx, c.Method, c.MethodRevision)
	if err != nil {
		return BudgetContext{}, err
	}
	return s.budgetContext(ctx, m, nil, c.RunID, c.Analyte)
}

// budgetContext is the budget context of analyte's results in run runID
// (read when the spec needs its materials, unless run is given) under
// method m.
func (s *Service) budgetContext(ctx context.Context, m *Method, run *Run, runID, analyte string) (BudgetContext, error) {
	a, ok := m.Analyte(analyte)
	if !ok || a.Uncertainty == nil {
		return BudgetContext{}, nil
	}
	bc := BudgetContext{Spec: a.Uncertainty, Unit: a.Unit}
	if !slices.Contains(a.Uncertainty.Terms, TermStandards) {
		return bc, nil
	}
	if run == nil {
		var err error
		if run, err = s.GetRun(ctx, runID); err != nil {
			return BudgetContext{}, err
		}
	}
	if len(run.Materials) == 0 {
		return bc, nil
	}
	lineage, err := s.store.MaterialLineage(ctx, run.Materials)
	if err != nil {
		return BudgetContext{}, err
	}
	bc.Standards = StandardsTermOf(analyte, run.Materials, lineage)
	return bc, nil
}

// addHistory adds to bc the top-down estimate from the QC history of
// method's analyte now, when bc's spec takes it from there. The history
// changes with every verification, so it is read for each write and kept
// in no per-curve context.
func (s *Service) addHistory(ctx context.Context, method, analyte string, bc *BudgetContext) error {
	if bc.Spec == nil || bc.Spec.TopDownSource != TopDownSourceHistory || bc.Spec.Approach == "" || bc.Spec.Approach == ApproachBottomUp {
		return nil
	}
	var err error
	bc.History, bc.HistoryGap, err = s.HistoryTopDown(ctx, method, analyte)
	return err
}

// runBudgetContexts returns the budget context of each analyte of samples
// in run under method m; analytes without a spec are absent.
func (s *Service) runBudgetContexts(ctx context.Context, m *Method, run *Run, samples []Sample) (map[string]BudgetContext, error) {
	out := map[string]BudgetContext{}
	for _, sm := range samples {
		if _, done := out[sm.Analyte]; done {
			continue
		}
		bc, err := s.budgetContext(ctx, m, run, run.ID, sm.Analyte)
		if err == nil {
			err = s.addHistory(ctx, m.Name, sm.Analyte, &bc)
		}
		if err != nil {
			return nil, err
		}
		out[sm.Analyte] = bc
	}
	return out, nil
}
