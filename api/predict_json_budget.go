package api

// The budget member of a prediction result, appended by hand as the rest of
// the prediction response (predict_json.go): encoding/json's reflection cost
// the route more than the budget's computation.

import (
	"math"
	"slices"
	"strconv"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// As in predict_json.go, these conversions stop the build when a
// regeneration changes the members the encoder below lists by hand.
var (
	_ = struct {
		Approach         oapi.UncertaintyApproach
		Cautions         *oapi.Cautions
		Combined         float64
		Conformity       *oapi.ConformityStatement
		Coverage         oapi.CoverageRule
		CoverageFactor   float64
		EffectiveDf      *float64
		Expanded         float64
		ExpandedText     string
		Level            float64
		MonteCarlo       *oapi.MonteCarloCheck
		Notes            []string
		RelativeCombined *float64
		ReportedInterval *oapi.ReportedInterval
		Terms            []oapi.BudgetTerm
		TopDown          *oapi.TopDownEstimate
		Unit             string
		Value            float64
		ValueText        string
	}(oapi.UncertaintyBudget{})
	_ = struct {
		Coefficient    *float64
		Contribution   float64
		Df             *float64
		Distribution   *string
		Group          *string
		Name           string
		Relative       *float64
		Share          float64
		Source         string
		StdUncertainty *float64
		Value          *float64
	}(oapi.BudgetTerm{})
	_ = struct {
		AcceptHigh *float64
		AcceptLow  *float64
		Accepted   bool
		Lower      *float64
		Outcome    oapi.ConformityOutcome
		Risk       string
		Rule       oapi.DecisionRule
		Statement  string
		Unit       string
		Upper      *float64
	}(oapi.ConformityStatement{})
	_ = struct {
		Combined     float64
		Expanded     float64
		ExpandedText string
		History      *oapi.TopDownProvenance
		Relative     float64
		Source       *oapi.TopDownSource
	}(oapi.TopDownEstimate{})
	_ = struct {
		From             oapi.Timestamp
		Recoveries       int
		ReferenceResults int
		To               oapi.Timestamp
	}(oapi.TopDownProvenance{})
	_ = struct {
		Agrees    bool
		Discarded int
		Draws     int
		GumHigh   float64
		GumLow    float64
		High      float64
		Level     float64
		Low       float64
		Mean      float64
		Screen    *string
		Sd        float64
		Seed      int64
		ShortHigh float64
		ShortLow  float64
		Tolerance float64
		Trigger   *oapi.MonteCarloTrigger
	}(oapi.MonteCarloCheck{})
	_ = struct {
		High     float64
		HighText string
		Level    float64
		Low      float64
		LowText  string
		Method   oapi.ReportedIntervalMethod
		Reason   string
	}(oapi.ReportedInterval{})
)

// jsonOut appends members in order; the first NaN or infinity stops it
// and is kept in bad.
type jsonOut struct {
	b   []byte
	bad float64
	ok  bool
}

func (o *jsonOut) key(k string) { o.b = append(o.b, k...) }

func (o *jsonOut) raw(k []byte) { o.b = append(o.b, k...) }

func (o *jsonOut) float(k string, f float64) {
	if !o.ok {
		return
	}
	o.key(k)
	if o.b, o.ok = appendJSONFloat(o.b, f); !o.ok {
		o.bad = f
	}
}

func (o *jsonOut) floatPtr(k string, f *float64) {
	if !o.ok {
		return
	}
	o.key(k)
	if o.b, o.ok = appendJSONFloatPtr(o.b, f); !o.ok {
		o.bad = *f
	}
}

func (o *jsonOut) str(k, s string) {
	o.key(k)
	o.b = appendJSONString(o.b, s)
}

func (o *jsonOut) boolean(k string, v bool) {
	o.key(k)
	o.b = strconv.AppendBool(o.b, v)
}

// timestamp appends t as oapi.Timestamp encodes it (a year outside
// 0000–9999 stops the encoder, as it stops encoding/json).
func (o *jsonOut) timestamp(k string, t oapi.Timestamp) {
	o.key(k)
	b, err := t.MarshalJSON()
	if err != nil {
		o.ok = false
		return
	}
	o.b = append(o.b, b...)
}

func (o *jsonOut) integer(k string, v int64) {
	o.key(k)
	o.b = strconv.AppendInt(o.b, v, 10)
}

// appendBudgetJSON appends u as encoding/json writes it; on a NaN or
// infinity it returns false and the offending number.
func appendBudgetJSON(b []byte, u *oapi.UncertaintyBudget) ([]byte, float64, bool) {
	o := &jsonOut{b: b, ok: true}
	o.str(`{"approach":`, string(u.Approach))
	if u.Cautions != nil {
		o.key(`,"cautions":`)
		o.b = appendJSONStrings(o.b, *u.Cautions)
	}
	o.float(`,"combined":`, u.Combined)
	if c := u.Conformity; c != nil {
		o.floatPtr(`,"conformity":{"accept_high":`, c.AcceptHigh)
		o.floatPtr(`,"accept_low":`, c.AcceptLow)
		o.boolean(`,"accepted":`, c.Accepted)
		o.floatPtr(`,"lower":`, c.Lower)
		o.str(`,"outcome":`, string(c.Outcome))
		o.str(`,"risk":`, c.Risk)
		o.str(`,"rule":`, string(c.Rule))
		o.str(`,"statement":`, c.Statement)
		o.str(`,"unit":`, c.Unit)
		o.floatPtr(`,"upper":`, c.Upper)
		o.key(`}`)
	}
	o.str(`,"coverage":`, string(u.Coverage))
	o.float(`,"coverage_factor":`, u.CoverageFactor)
	o.floatPtr(`,"effective_df":`, u.EffectiveDf)
	o.float(`,"expanded":`, u.Expanded)
	o.str(`,"expanded_text":`, u.ExpandedText)
	o.float(`,"level":`, u.Level)
	if m := u.MonteCarlo; m != nil {
		o.boolean(`,"monte_carlo":{"agrees":`, m.Agrees)
		o.integer(`,"discarded":`, int64(m.Discarded))
		o.integer(`,"draws":`, int64(m.Draws))
		o.float(`,"gum_high":`, m.GumHigh)
		o.float(`,"gum_low":`, m.GumLow)
		o.float(`,"high":`, m.High)
		o.float(`,"level":`, m.Level)
		o.float(`,"low":`, m.Low)
		o.float(`,"mean":`, m.Mean)
		if m.Screen != nil {
			o.str(`,"screen":`, *m.Screen)
		}
		o.float(`,"sd":`, m.Sd)
		o.integer(`,"seed":`, m.Seed)
		o.float(`,"short_high":`, m.ShortHigh)
		o.float(`,"short_low":`, m.ShortLow)
		o.float(`,"tolerance":`, m.Tolerance)
		if m.Trigger != nil {
			o.str(`,"trigger":`, string(*m.Trigger))
		}
		o.key(`}`)
	}
	o.key(`,"notes":`)
	o.b = appendJSONStrings(o.b, u.Notes)
	o.floatPtr(`,"relative_combined":`, u.RelativeCombined)
	if ri := u.ReportedInterval; ri != nil {
		o.float(`,"reported_interval":{"high":`, ri.High)
		o.str(`,"high_text":`, ri.HighText)
		o.float(`,"level":`, ri.Level)
		o.float(`,"low":`, ri.Low)
		o.str(`,"low_text":`, ri.LowText)
		o.str(`,"method":`, string(ri.Method))
		o.str(`,"reason":`, ri.Reason)
		o.key(`}`)
	}
	o.key(`,"terms":`)
	if u.Terms == nil {
		o.key("null")
	} else {
		o.key("[")
		for i := range u.Terms {
			t := &u.Terms[i]
			if i > 0 {
				o.key(",")
			}
			o.key("{")
			if t.Coefficient != nil {
				o.floatPtr(`"coefficient":`, t.Coefficient)
				o.key(",")
			}
			o.float(`"contribution":`, t.Contribution)
			o.floatPtr(`,"df":`, t.Df)
			if t.Distribution != nil {
				o.str(`,"distribution":`, *t.Distribution)
			}
			if t.Group != nil {
				o.str(`,"group":`, *t.Group)
			}
			o.str(`,"name":`, t.Name)
			if t.Relative != nil {
				o.floatPtr(`,"relative":`, t.Relative)
			}
			o.float(`,"share":`, t.Share)
			o.str(`,"source":`, t.Source)
			if t.StdUncertainty != nil {
				o.floatPtr(`,"std_uncertainty":`, t.StdUncertainty)
			}
			if t.Value != nil {
				o.floatPtr(`,"value":`, t.Value)
			}
			o.key("}")
		}
		o.key("]")
	}
	if td := u.TopDown; td != nil {
		o.float(`,"top_down":{"combined":`, td.Combined)
		o.float(`,"expanded":`, td.Expanded)
		o.str(`,"expanded_text":`, td.ExpandedText)
		if h := td.History; h != nil {
			o.timestamp(`,"history":{"from":`, h.From)
			o.integer(`,"recoveries":`, int64(h.Recoveries))
			o.integer(`,"reference_results":`, int64(h.ReferenceResults))
			o.timestamp(`,"to":`, h.To)
			o.key(`}`)
		}
		o.float(`,"relative":`, td.Relative)
		if td.Source != nil {
			o.str(`,"source":`, string(*td.Source))
		}
		o.key(`}`)
	}
	o.str(`,"unit":`, u.Unit)
	o.float(`,"value":`, u.Value)
	o.str(`,"value_text":`, u.ValueText)
	o.key(`}`)
	return o.b, o.bad, o.ok
}

// budgetJSONPlan holds the JSON of the parts of a curve's budgets that do
// not depend on the sample, for appendPlannedBudgetJSON.
type budgetJSONPlan struct {
	unit []byte // `,"unit":"…","value":`
	// Per outcome (calib.Outcomes): the conformity from "lower" to the
	// statement's opening `Result `, and from the statement's middle to
	// the end of the conformity.
	outcomeHead, outcomeTail [len(calib.Outcomes)][]byte
	// terms holds, per term of the plan, its ν when fixed (`,"df":…`),
	// the members from its group to the share's key, and its source to
	// the end.
	terms []termJSON
}

type termJSON struct{ df, mid, end []byte }

// newBudgetJSONPlan encodes the sample-independent parts of p's budgets;
// false when a limit cannot be encoded.
func newBudgetJSONPlan(p *lab.BudgetPlan) (*budgetJSONPlan, bool) {
	j := &budgetJSONPlan{}
	j.unit = appendJSONString(append(j.unit, `,"unit":`...), p.Context.Unit)
	j.unit = append(j.unit, `,"value":`...)
	for _, t := range p.Terms {
		var tj termJSON
		if t.FixedDF {
			o := &jsonOut{ok: true}
			o.floatPtr(`,"df":`, finitePtr(&t.DF))
			tj.df = o.b
		}
		o := &jsonOut{ok: true}
		if t.Group != "" {
			o.str(`,"group":`, t.Group)
		}
		o.str(`,"name":`, t.Name)
		o.key(`,"share":`)
		tj.mid = o.b
		tj.end = append(appendJSONString([]byte(`,"source":`), t.Source), '}')
		j.terms = append(j.terms, tj)
	}
	if !p.HasLimits {
		return j, true
	}
	l := p.Context.Spec.Limits
	for k, outcome := range calib.Outcomes {
		o := &jsonOut{ok: true}
		o.floatPtr(`,"lower":`, l.Lower)
		o.str(`,"outcome":`, outcome)
		o.str(`,"risk":`, p.Rule.Risk(outcome))
		o.str(`,"rule":`, l.Rule)
		o.key(`,"statement":"Result `)
		j.outcomeHead[k] = o.b
		// The statement's middle and end as one JSON string, less its
		// opening quote: escaping is character by character, so the pieces
		// escaped apart are the whole escaped.
		tail := appendJSONString(nil, p.StatementMiddle+outcome+".")[1:]
		o = &jsonOut{b: tail, ok: true}
		o.str(`,"unit":`, p.Context.Unit)
		o.floatPtr(`,"upper":`, l.Upper)
		o.key(`}`)
		j.outcomeTail[k] = o.b
		if !o.ok {
			return nil, false
		}
	}
	return j, true
}

// appendPlannedBudgetJSON appends the budget f computed by p as
// appendBudgetJSON appends budgetOut(p.Record(f)), without the record: the
// sample-independent parts come encoded from j. On a NaN or infinity it
// returns false and the offending number.
func appendPlannedBudgetJSON(b []byte, p *lab.BudgetPlan, j *budgetJSONPlan, f *lab.BudgetFigures, m *floatMemo) ([]byte, float64, bool) {
	o := &jsonOut{b: b, ok: true}
	// The numbers that recur from sample to sample (the level, k and the
	// terms' ν) are formatted once per request.
	memo := func(k string, slot int, v float64) {
		if !o.ok {
			return
		}
		o.key(k)
		if slot < len(m.n) && m.n[slot] > 0 && m.bits[slot] == math.Float64bits(v) {
			o.b = append(o.b, m.text[slot][:m.n[slot]]...)
			return
		}
		start := len(o.b)
		if o.b, o.ok = appendJSONFloat(o.b, v); !o.ok {
			o.bad = v
			return
		}
		if slot < len(m.n) && len(o.b)-start <= len(m.text[slot]) {
			m.bits[slot] = math.Float64bits(v)
			m.n[slot] = uint8(copy(m.text[slot][:], o.b[start:]))
		}
	}
	// y and U as texts, each formatted once for the statement and its member.
	var vbuf, ebuf [32]byte
	vt, et := f.AppendValueText(vbuf[:0]), f.AppendExpandedText(ebuf[:0])
	o.float(`{"approach":"bottom_up","combined":`, f.Combined)
	if f.HasConformity {
		c := &f.Conformity
		k := slices.Index(calib.Outcomes[:], c.Outcome)
		if k < 0 {
			return o.b, math.NaN(), false
		}
		o.floatPtr(`,"conformity":{"accept_high":`, finitePtr(&c.AcceptHigh))
		o.floatPtr(`,"accept_low":`, finitePtr(&c.AcceptLow))
		o.boolean(`,"accepted":`, c.Accepted)
		o.raw(j.outcomeHead[k])
		o.raw(vt)
		o.key(" ± ")
		o.raw(et)
		o.raw(j.outcomeTail[k])
	}
	o.str(`,"coverage":`, string(f.Coverage))
	memo(`,"coverage_factor":`, 0, f.CoverageFactor)
	o.floatPtr(`,"effective_df":`, finitePtr(&f.EffectiveDF))
	o.float(`,"expanded":`, f.Expanded)
	o.key(`,"expanded_text":"`)
	o.raw(et)
	o.key(`"`)
	memo(`,"level":`, 1, f.Level)
	o.key(`,"notes":[`)
	for i, n := range f.Notes {
		if i > 0 {
			o.key(",")
		}
		o.b = appendJSONString(o.b, n)
	}
	o.floatPtr(`],"relative_combined":`, finitePtr(&f.RelativeCombined))
	o.key(`,"terms":[`)
	for i := range f.Terms {
		t := &f.Terms[i]
		if i > 0 {
			o.key(",")
		}
		tj := &j.terms[f.TermIDs[i]]
		o.float(`{"contribution":`, t.Contribution)
		switch {
		case tj.df != nil:
			o.raw(tj.df)
		case calib.Finite(t.DF):
			memo(`,"df":`, 2+i, t.DF)
		default:
			o.key(`,"df":null`)
		}
		o.raw(tj.mid)
		o.float("", t.Share)
		o.raw(tj.end)
	}
	o.key("]")
	o.raw(j.unit)
	o.float("", f.Value)
	o.key(`,"value_text":"`)
	o.raw(vt)
	o.key(`"}`)
	return o.b, o.bad, o.ok
}

// floatMemo keeps, for one request's budgets, the JSON of the last number
// written in each of a few places (k, the level, the first terms' ν).
type floatMemo struct {
	bits [10]uint64
	n    [10]uint8 // the text's length; 0: none kept
	text [10][32]byte
}

// finitePtr is f, or nil when *f is not finite (as the record's optional
// numbers).
func finitePtr(f *float64) *float64 {
	if !calib.Finite(*f) {
		return nil
	}
	return f
}
