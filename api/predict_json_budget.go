package api

// The budget member of a prediction result, appended by hand as the rest of
// the prediction response (predict_json.go): encoding/json's reflection cost
// the route more than the budget's computation.

import (
	"strconv"

	"curvekeeper/api/oapi"
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
		Sd        float64
		Seed      int64
		ShortHigh float64
		ShortLow  float64
		Tolerance float64
	}(oapi.MonteCarloCheck{})
)

// jsonOut appends members in order; the first NaN or infinity stops it
// and is kept in bad.
type jsonOut struct {
	b   []byte
	bad float64
	ok  bool
}

func (o *jsonOut) key(k string) { o.b = append(o.b, k...) }

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
		o.float(`,"sd":`, m.Sd)
		o.integer(`,"seed":`, m.Seed)
		o.float(`,"short_high":`, m.ShortHigh)
		o.float(`,"short_low":`, m.ShortLow)
		o.float(`,"tolerance":`, m.Tolerance)
		o.key(`}`)
	}
	o.key(`,"notes":`)
	o.b = appendJSONStrings(o.b, u.Notes)
	o.floatPtr(`,"relative_combined":`, u.RelativeCombined)
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
