package lab

// The budgets of many results against one curve, as the prediction route
// answers them: what does not depend on the sample is made once per curve
// (a BudgetPlan), and each sample's budget is computed into reused figures.
// ResultBudget is the reference these must equal (budget_plan_test.go).

import (
	"math"

	"curvekeeper/calib"
)

// BudgetPlan is what the budgets of one curve's results share whatever the
// sample: the budget context, the method's sample-independent terms
// (standards, preparation, recovery) and notes, the limits and the middle
// of the conformity statement. It is read-only once made, so one plan may
// serve concurrent requests.
type BudgetPlan struct {
	Context BudgetContext
	// Limits and Rule are the conformity's, HasLimits false without limits.
	Limits    calib.Specification
	Rule      calib.DecisionRule
	HasLimits bool
	// StatementMiddle is the conformity statement's text between U and the
	// outcome (StatementMiddle of Limits and Rule).
	StatementMiddle string
	// Terms are the budget's possible terms in order: the calibration
	// term, then the spec's; a budget holds them all but a repeatability
	// term left out (BudgetFigures.TermIDs index them).
	Terms    []PlanTerm
	steps    []planStep
	maxTerms int
	screens  bool // the spec runs Monte Carlo by itself where the GUM is in doubt
}

// planStep is one term of the method's spec, after the calibration term:
// fixed terms, a fixed note (the term is left out), or the repeatability
// term computed per sample.
type planStep struct {
	terms         []calib.UncertaintyTerm
	first         int // the index in BudgetPlan.Terms of the step's first term
	note          string
	repeatability bool
}

// PlanTerm is what a term of a plan's budgets is whatever the sample: its
// name, source and group and, when FixedDF, its degrees of freedom (+Inf
// for infinite, as the budget states them).
type PlanTerm struct {
	Name, Source, Group string
	DF                  float64
	FixedDF             bool
}

// NewBudgetPlan returns the plan of the budgets under bc; nil when bc has
// no spec, or asks for what a plan does not cover (an approach other than
// bottom-up, or a Monte Carlo check): ResultBudget then makes each budget.
func NewBudgetPlan(bc BudgetContext) *BudgetPlan {
	spec := bc.Spec
	if spec == nil || (spec.Approach != "" && spec.Approach != ApproachBottomUp) || bc.MonteCarlo != nil {
		return nil
	}
	p := &BudgetPlan{Context: bc, maxTerms: 1, screens: screensResults(spec),
		Terms: []PlanTerm{{Name: calibrationTermName, Source: string(calib.SourceCalibration)}}}
	for _, t := range spec.Terms {
		var st planStep
		switch t {
		case TermStandards:
			if bc.Standards == nil {
				st.note = noteNoStandards
			} else {
				st.terms = []calib.UncertaintyTerm{bc.Standards.term()}
			}
		case TermPreparation:
			st.terms = appendPreparationTerms(nil, spec.Preparation)
		case TermRepeatability:
			st.repeatability = true
			st.first = len(p.Terms)
			p.Terms = append(p.Terms, PlanTerm{Name: repeatabilityTermName, Source: string(calib.SourceRepeatability)})
			p.maxTerms++
		case TermRecovery:
			st.terms = []calib.UncertaintyTerm{spec.Recovery.term()}
		default:
			continue
		}
		if st.terms != nil {
			st.first = len(p.Terms)
		}
		for _, t := range st.terms {
			df := t.DF
			if df == 0 {
				df = math.Inf(1) // as calib resolves it
			}
			p.Terms = append(p.Terms, PlanTerm{Name: t.Name, Source: string(t.Source), Group: t.Group, DF: df, FixedDF: true})
		}
		p.maxTerms += len(st.terms)
		p.steps = append(p.steps, st)
	}
	if l := spec.Limits; l != nil {
		p.Limits, p.Rule, p.HasLimits = l.specification(bc.Unit), calib.DecisionRule(l.Rule), true
		p.StatementMiddle = StatementMiddle(p.Limits, p.Rule)
	}
	return p
}

// BudgetFigures is one result's budget as a plan computes it: the GUM
// budget without its cautions and texts (calib.ComputeBudgetInto), the
// notes and the conformity (without cautions). Reused from sample to
// sample, it keeps its arrays.
type BudgetFigures struct {
	calib.Budget
	Notes         []string
	Conformity    calib.Conformity
	HasConformity bool
	// TermIDs[i] is the index in the plan's Terms of Budget.Terms[i].
	TermIDs []int
	in      []calib.UncertaintyTerm
}

// Covers reports whether Compute gives the budget of a result predicted
// as pr: false when the spec runs a Monte Carlo check by itself for it
// (calib.ScreenGUM puts the GUM framework in doubt), which ResultBudget
// then makes. It allocates nothing.
func (p *BudgetPlan) Covers(rep *calib.Report, pr calib.Prediction) bool {
	return !p.screens || !rep.ScreenGUM(pr).InDoubt
}

// Compute computes into f the budget of a result predicted as pr from the
// readings (responses, dilution) against the curve report rep, as
// ResultBudget does, for a result the plan Covers; false when ResultBudget
// gives none. With f reused it allocates nothing, unless the spec has the
// repeatability term.
func (p *BudgetPlan) Compute(rep *calib.Report, pr calib.Prediction, responses []float64, dilution float64, f *BudgetFigures) (bool, error) {
	cal, err := rep.GUMCalibrationTerm(calibrationTermName, pr)
	if err != nil || pr.Concentration == 0 {
		return false, nil
	}
	if cap(f.in) < p.maxTerms {
		f.in = make([]calib.UncertaintyTerm, 0, p.maxTerms)
	}
	in := append(f.in[:0], cal)
	f.Notes = f.Notes[:0]
	f.TermIDs = append(f.TermIDs[:0], 0)
	for i := range p.steps {
		st := &p.steps[i]
		switch {
		case st.note != "":
			f.Notes = append(f.Notes, st.note)
		case st.repeatability:
			rt, note := repeatabilityTerm(rep, responses, dilution)
			if note != "" {
				f.Notes = append(f.Notes, note)
				continue
			}
			in = append(in, rt)
			f.TermIDs = append(f.TermIDs, st.first)
		default:
			in = append(in, st.terms...)
			for k := range st.terms {
				f.TermIDs = append(f.TermIDs, st.first+k)
			}
		}
	}
	f.in = in
	spec := p.Context.Spec
	if err := calib.ComputeBudgetInto(calib.BudgetInput{Model: calib.ModelProduct, Coverage: calib.Coverage(spec.Coverage), Terms: in}, &f.Budget); err != nil {
		return false, nil
	}
	f.HasConformity = p.HasLimits
	if p.HasLimits {
		if f.Conformity, err = calib.Judge(f.Value, f.Expanded, p.Limits, p.Rule); err != nil {
			return false, err
		}
	}
	return true, nil
}

// Record returns the figures as ResultBudget's record (without cautions).
func (p *BudgetPlan) Record(f *BudgetFigures) *BudgetRecord {
	b := f.Budget
	var buf [32]byte
	b.ExpandedText = string(b.AppendExpandedText(buf[:0]))
	b.ValueText = string(b.AppendValueText(buf[:0]))
	rec := &BudgetRecord{Approach: ApproachBottomUp, Unit: p.Context.Unit, Notes: append([]string{}, f.Notes...)}
	rec.fill(b)
	rec.Terms = termsOut(b.Terms)
	if f.HasConformity {
		rec.Conformity = conformityOut(p.Context.Spec.Limits, p.Context.Unit, f.Conformity, rec.ValueText, rec.ExpandedText)
	}
	return rec
}
