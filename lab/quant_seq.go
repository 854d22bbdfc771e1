package lab

import (
	"encoding/json"
	"fmt"
	"time"

	"curvekeeper/lab/sequence"
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
}

// FlagSequenceWithheld marks a result its sequence withholds (a failed
// verification after it, no opening verification, an unclosed bracket);
// like an IS failure it stays withheld whatever the curve's review says.
const FlagSequenceWithheld = "sequence_withheld"

// checkSequence refuses a sequence that breaks a rule before fitting.
func checkSequence(seq *RunSequence, samples []Sample) error {
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
		case (in.Kind == "ccb" || in.Kind == "calibration_blank" || in.Kind == "method_blank") && in.Judged == "":
			return FieldError(p+"/judged", "blanks are judged before they are posted (pass or fail)")
		}
	}
	return nil
}

// evaluateSequence evaluates the run's sequence for the analyte of curve c:
// the sample injections of samples that measured it and the checks of that
// analyte (or of none). found quantifies a check's readings against c. It
// returns each sample id's record.
func evaluateSequence(seq *RunSequence, analyte string, hasSample map[string]bool, found func(in RunInjection) (float64, bool)) (map[string]SequenceRecord, error) {
	var inj []sequence.Injection
	for _, in := range seq.Injections {
		k := sequence.Kind(in.Kind)
		isCheck := k == sequence.ICV || k == sequence.CCV || k == sequence.CCB
		if (k == sequence.Sample || k == sequence.QCSample) && !hasSample[in.ID] {
			continue
		}
		if isCheck && in.Analyte != "" && in.Analyte != analyte {
			continue
		}
		si := sequence.Injection{ID: in.ID, Kind: k, Position: in.Position, Judged: sequence.Judgement(in.Judged), Nominal: in.Nominal}
		if in.Time != nil {
			si.Time = *in.Time
		}
		if (k == sequence.ICV || k == sequence.CCV) && in.Judged == "" {
			f, ok := found(in)
			if !ok {
				si.Judged, si.Reason = sequence.Fail, "no concentration could be read back from the curve"
			}
			si.Found = f
		}
		inj = append(inj, si)
	}
	ev, err := sequence.Evaluate(sequence.Sequence{Injections: inj, Complete: seq.Complete}, sequence.Config{})
	if err != nil {
		return nil, FieldError("/sequence", "%v", err)
	}
	checks := make([]SequenceCheck, 0, len(ev.Checks))
	for _, c := range ev.Checks {
		checks = append(checks, SequenceCheck{c.ID, c.Position, string(c.Kind), c.Passed, c.RecoveryPct, c.Detail})
	}
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
		out[s.ID] = SequenceRecord{Position: s.Position, State: string(s.State), Reason: s.Reason, Opening: s.Opening,
			Closing: s.Closing, Notes: notes, Checks: checks, Breaches: breaches}
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
	has := map[string]bool{}
	for _, sm := range in.Samples {
		if sm.Analyte == c.Analyte {
			has[sm.ID] = true
		}
	}
	recs, err := evaluateSequence(in.Sequence, c.Analyte, has, func(inj RunInjection) (float64, bool) {
		sm := Sample{Responses: inj.Responses, ISResponses: inj.ISResponses}
		q := Quantify(c.Report, QuantResponses(c, &sm), 1)
		if q.Conc == nil {
			return 0, false
		}
		return *q.Conc, true
	})
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
