package lab

import (
	"encoding/json"
	"fmt"
	"time"

	"curvekeeper/lab/sequence"
	"curvekeeper/lab/ucum"
)

// RunSequence is a run's injections in acquisition order.
type RunSequence struct {
	// Complete: no injection will follow (default true in the api); an
	// unclosed bracket then withholds its samples instead of leaving them
	// provisional.
	Complete   bool           `json:"complete"`
	Injections []RunInjection `json:"injections"`
}

// RunInjection is one injection of a run's sequence. A sample injection
// names a sample of the run by its id (every analyte of that sample); an
// ICV or CCV names its analyte and nominal concentration and carries its
// readings, quantified against the run's curve of that analyte, or a
// verdict reached elsewhere (Judged, then for every analyte when Analyte is
// empty).
type RunInjection struct {
	Position    int        `json:"position"`
	Kind        string     `json:"kind"`
	ID          string     `json:"id"`
	Time        *time.Time `json:"time,omitempty"`
	Analyte     string     `json:"analyte,omitempty"`
	Nominal     float64    `json:"nominal,omitzero"`
	Responses   []float64  `json:"responses,omitempty"`
	ISResponses []float64  `json:"is_responses,omitempty"`
	Judged      string     `json:"judged,omitempty"`
}

// SequenceRecord is a result's place in its run's sequence (JSON in
// sample_results.sequence).
type SequenceRecord struct {
	Position int              `json:"position"`
	State    string           `json:"state"`
	Reason   string           `json:"reason"`
	Opening  int              `json:"opening"`
	Closing  int              `json:"closing"`
	Notes    []string         `json:"notes"`
	Checks   []SequenceCheck  `json:"checks"`
	Breaches []SequenceBreach `json:"breaches"`
	// CarryOver is the check of the blank after the highest standard, and
	// Blank the blank-subtraction policy applied to X0 (the sample's
	// undiluted x̂0) giving Net; nil in records stored before they existed.
	CarryOver *CarryOverRecord `json:"carry_over,omitempty"`
	Blank     *BlankRecord     `json:"blank_correction,omitempty"`
}

// CarryOverRecord is sequence.CarryOver as stored.
type CarryOverRecord struct {
	Evaluated       bool    `json:"evaluated"`
	HighestStandard int     `json:"highest_standard"`
	BlankPosition   int     `json:"blank_position"`
	AnalyteResponse float64 `json:"analyte_response"`
	AnalyteLimit    float64 `json:"analyte_limit"`
	AnalytePct      float64 `json:"analyte_pct"`
	AnalytePassed   bool    `json:"analyte_passed"`
	ISEvaluated     bool    `json:"is_evaluated"`
	ISResponse      float64 `json:"is_response"`
	ISLimit         float64 `json:"is_limit"`
	ISPct           float64 `json:"is_pct"`
	ISPassed        bool    `json:"is_passed"`
	Passed          bool    `json:"passed"`
	Detail          string  `json:"detail"`
	Source          string  `json:"source"`
}

// BlankRecord is the blank subtraction of one sample.
type BlankRecord struct {
	Policy    string  `json:"policy"`
	Statement string  `json:"statement"`
	Blanks    int     `json:"blanks"`
	Applied   bool    `json:"applied"`
	X0        float64 `json:"x0"`    // the sample's undiluted x̂0 in the curve's unit
	Value     float64 `json:"value"` // subtracted from X0
	Net       float64 `json:"net"`   // X0 − Value
}

// SequenceBreach is a frequency rule the sequence broke.
type SequenceBreach struct {
	Rule     string `json:"rule"`
	Position int    `json:"position"`
	Detail   string `json:"detail"`
}

// SequenceCheck is the verdict of one check of the analyte's sequence.
type SequenceCheck struct {
	ID          string  `json:"id"`
	Position    int     `json:"position"`
	Kind        string  `json:"kind"`
	Passed      bool    `json:"passed"`
	RecoveryPct float64 `json:"recovery_pct"`
	Detail      string  `json:"detail"`
	// Value and Limit: a blank judged here, its x̂0 and the limit of |x̂0|.
	Value *float64 `json:"value,omitempty"`
	Limit *float64 `json:"limit,omitempty"`
}

// FlagSequenceWithheld marks a result its sequence withholds (a failed
// verification after it, no opening verification, an unclosed bracket);
// like an IS failure it stays withheld whatever the curve's review says.
const FlagSequenceWithheld = "sequence_withheld"

func isBlankKind(k string) bool {
	return k == string(sequence.CCB) || k == string(sequence.CalibrationBlank) || k == string(sequence.MethodBlank)
}

// checkSequence refuses a sequence that breaks a rule before fitting.
func checkSequence(m *Method, seq *RunSequence, samples []Sample) error {
	if seq == nil {
		return nil
	}
	ids := map[string]bool{}
	for _, s := range samples {
		ids[s.ID] = true
	}
	kinds := map[string]bool{}
	for _, k := range []sequence.Kind{sequence.CalibrationStandard, sequence.ICV, sequence.CCV, sequence.CCB,
		sequence.CalibrationBlank, sequence.MethodBlank, sequence.Sample, sequence.QCSample} {
		kinds[string(k)] = true
	}
	for i, in := range seq.Injections {
		p := fmt.Sprintf("/sequence/injections/%d", i)
		switch {
		case !kinds[in.Kind]:
			return FieldError(p+"/kind", "unknown injection kind %q", in.Kind)
		case (in.Kind == "sample" || in.Kind == "qc_sample") && !ids[in.ID]:
			return FieldError(p+"/id", "no sample of the run has the id %q", in.ID)
		case in.Judged != "" && in.Judged != "pass" && in.Judged != "fail":
			return FieldError(p+"/judged", "judged must be pass or fail")
		case (in.Kind == "icv" || in.Kind == "ccv") && in.Judged == "" && (in.Analyte == "" || !(in.Nominal > 0) || len(in.Responses) == 0):
			return FieldError(p, "a verification judged here needs its analyte, nominal concentration > 0 and responses")
		case isBlankKind(in.Kind) && in.Judged == "" && (in.Analyte == "" || len(in.Responses) == 0):
			return FieldError(p+"/judged", "a blank is either judged before it is posted (pass or fail) or judged here from its analyte and responses")
		}
		if in.Analyte == "" || len(in.Responses) == 0 {
			continue
		}
		a, ok := m.Analyte(in.Analyte)
		if !ok {
			return FieldError(p+"/analyte", "method %s does not list the analyte %q", m.Name, in.Analyte)
		}
		if in.Judged == "" {
			// Quantified here: with an internal standard, on the ratios.
			if _, err := isRatios(a, in.Responses, in.ISResponses, p+"/is_responses"); err != nil {
				return err
			}
		} else if len(in.ISResponses) > 0 && len(in.ISResponses) != len(in.Responses) {
			return FieldError(p+"/is_responses", "give one IS response per response (%d responses, %d IS responses)", len(in.Responses), len(in.ISResponses))
		}
	}
	return nil
}

// seqConfig is the sequence rules of analyte a's curve c: the blank limit
// (a fraction of the LLOQ, the curve's lowest non-zero standard, or the
// reporting limit in the analyte's unit), the blank subtraction and the IS
// window.
func seqConfig(c *CurveInput) sequence.Config {
	q := c.Rules.Quant
	cfg := sequence.Config{BlankFractionOfLLOQ: q.BlankLimitFractionOfLLOQ, BlankSubtraction: sequence.BlankSubtraction(q.BlankSubtraction),
		ISWindow: q.ISWindow()}
	if c.Report != nil && c.Report.Range.Low > 0 {
		cfg.LLOQ = c.Report.Range.Low
	}
	if cfg.BlankFractionOfLLOQ > 0 && !(cfg.LLOQ > 0) {
		cfg.BlankFractionOfLLOQ = 0 // no fitted range: judged against the reporting limit, if any
	}
	if rl := q.ReportingLimit; rl > 0 {
		if q.ReportingUnit == "" || q.ReportingUnit == c.Rules.Unit {
			cfg.ReportingLimit = rl
		} else if v, err := ucum.Convert(rl, q.ReportingUnit, c.Rules.Unit); err == nil {
			cfg.ReportingLimit = v
		}
	}
	return cfg
}

func mean(v []float64) float64 {
	if len(v) == 0 {
		return 0
	}
	var s float64
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

// seqInputs is what the sequence of one analyte's curve is evaluated with:
// the samples that measured the analyte (id → undiluted x̂0, 0 when the
// curve gave none), its standards by level, the rules, and found, which
// quantifies a check's or blank's readings against the curve.
type seqInputs struct {
	x0        map[string]float64
	hasSample map[string]bool
	standards map[string]Standard
	cfg       sequence.Config
	found     func(in RunInjection) (float64, bool)
}

// evaluateSequence evaluates the run's sequence for one analyte: the
// sample injections of samples that measured it, the checks and blanks of
// that analyte (or of none), and the calibration standards with their
// responses (for the carry-over check). It returns each sample id's record.
func evaluateSequence(seq *RunSequence, analyte string, si seqInputs) (map[string]SequenceRecord, error) {
	var inj []sequence.Injection
	for _, in := range seq.Injections {
		k := sequence.Kind(in.Kind)
		isCheck := k == sequence.ICV || k == sequence.CCV || isBlankKind(in.Kind)
		if (k == sequence.Sample || k == sequence.QCSample) && !si.hasSample[in.ID] {
			continue
		}
		if isCheck && in.Analyte != "" && in.Analyte != analyte {
			continue
		}
		one := sequence.Injection{ID: in.ID, Kind: k, Position: in.Position, Judged: sequence.Judgement(in.Judged), Nominal: in.Nominal}
		if in.Time != nil {
			one.Time = *in.Time
		}
		switch {
		case k == sequence.CalibrationStandard:
			if st, ok := si.standards[in.ID]; ok {
				one.Nominal, one.Response, one.ISResponse = st.Concentration, mean(st.Responses), mean(st.ISResponses)
			}
		case k == sequence.Sample || k == sequence.QCSample:
			one.Result = si.x0[in.ID]
		case isCheck && len(in.Responses) > 0:
			one.Response, one.ISResponse = mean(in.Responses), mean(in.ISResponses)
			if in.Judged != "" {
				break
			}
			f, ok := si.found(in)
			if !ok {
				one.Judged, one.Reason = sequence.Fail, "no concentration could be read back from the curve"
			}
			if k == sequence.ICV || k == sequence.CCV {
				one.Found = f
			} else {
				one.Result = f
			}
		}
		inj = append(inj, one)
	}
	ev, err := sequence.Evaluate(sequence.Sequence{Injections: inj, Complete: seq.Complete}, si.cfg)
	if err != nil {
		return nil, FieldError("/sequence", "%s: %v (the method's blank_limit_fraction_of_lloq or reporting_limit sets a blank's limit)", analyte, err)
	}
	checks := make([]SequenceCheck, 0, len(ev.Checks))
	for _, c := range ev.Checks {
		sc := SequenceCheck{ID: c.ID, Position: c.Position, Kind: string(c.Kind), Passed: c.Passed, RecoveryPct: c.RecoveryPct, Detail: c.Detail}
		if isBlankKind(string(c.Kind)) && c.Limit > 0 {
			sc.Value, sc.Limit = &c.Value, &c.Limit
		}
		checks = append(checks, sc)
	}
	co := CarryOverRecord(ev.CarryOver)
	breaches := make([]SequenceBreach, 0, len(ev.Breaches))
	for _, b := range ev.Breaches {
		breaches = append(breaches, SequenceBreach{b.Rule, b.Position, b.Detail})
	}
	out := map[string]SequenceRecord{}
	for _, s := range ev.Samples {
		notes := s.Notes
		if notes == nil {
			notes = []string{}
		}
		b := BlankRecord{Policy: string(ev.Blank.Policy), Statement: ev.Blank.Statement, Blanks: ev.Blank.Blanks,
			Applied: ev.Blank.Applied, X0: s.Result, Value: s.Blank, Net: s.Net}
		out[s.ID] = SequenceRecord{Position: s.Position, State: string(s.State), Reason: s.Reason, Opening: s.Opening,
			Closing: s.Closing, Notes: notes, Checks: checks, Breaches: breaches, CarryOver: &co, Blank: &b}
	}
	return out, nil
}

// SequenceOutcome is a sample's record in its sequence (JSON) and, when the
// sequence withholds it, the reason.
type SequenceOutcome struct {
	Record   []byte
	Withheld string
}

// SequenceOutcomes evaluates the run's sequence once for curve c and
// returns each sample id's outcome; nil when the run has no sequence.
func SequenceOutcomes(in *RunInput, c *CurveInput) (map[string]SequenceOutcome, error) {
	if in.Sequence == nil {
		return nil, nil
	}
	found := func(inj RunInjection) (float64, bool) {
		sm := Sample{Responses: inj.Responses, ISResponses: inj.ISResponses}
		q := Quantify(c.Report, QuantResponses(c, &sm), 1)
		if q.Conc == nil {
			return 0, false
		}
		return *q.Conc, true
	}
	si := seqInputs{x0: map[string]float64{}, hasSample: map[string]bool{}, standards: map[string]Standard{}, cfg: seqConfig(c), found: found}
	for i := range in.Samples {
		sm := &in.Samples[i]
		if sm.Analyte != c.Analyte {
			continue
		}
		si.hasSample[sm.ID] = true
		if v, ok := found(RunInjection{Responses: sm.Responses, ISResponses: sm.ISResponses}); ok {
			si.x0[sm.ID] = v
		}
	}
	for _, st := range in.Standards {
		if st.Analyte == c.Analyte {
			si.standards[st.Level] = st
		}
	}
	recs, err := evaluateSequence(in.Sequence, c.Analyte, si)
	if err != nil {
		return nil, err
	}
	out := make(map[string]SequenceOutcome, len(recs))
	for id, rec := range recs {
		b, err := json.Marshal(rec)
		if err != nil {
			return nil, err
		}
		o := SequenceOutcome{Record: b}
		if rec.State == string(sequence.Withheld) {
			o.Withheld = "sequence: " + rec.Reason
		}
		out[id] = o
	}
	return out, nil
}
