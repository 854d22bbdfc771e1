package api

import (
	"encoding/json"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
	"curvekeeper/lab/reported"
)

// quantFrom translates an analyte's internal standard and reporting rules.
func quantFrom(q *oapi.AnalyteQuant) lab.Quant {
	if q == nil {
		return lab.Quant{}
	}
	out := lab.Quant{
		InternalStandard:         string(zeroIfNil(q.InternalStandard)),
		ISWindowLowPct:           zeroIfNil(q.IsWindowLowPct),
		ISWindowHighPct:          zeroIfNil(q.IsWindowHighPct),
		ReportingUnit:            string(zeroIfNil(q.ReportingUnit)),
		ReportingLimit:           zeroIfNil(q.ReportingLimit),
		DetectionLimit:           zeroIfNil(q.DetectionLimit),
		SignificantFigures:       zeroIfNil(q.SignificantFigures),
		BlankLimitFractionOfLLOQ: zeroIfNil(q.BlankLimitFractionOfLloq),
	}
	if q.BlankSubtraction != nil {
		out.BlankSubtraction = string(*q.BlankSubtraction)
	}
	if q.Decimals != nil {
		out.Decimals, out.UseDecimals = *q.Decimals, true
	}
	if s := q.Qualifiers; s != nil {
		pick := func(r *oapi.ResultQualifier) lab.Qualifier {
			if r == nil {
				return lab.Qualifier{}
			}
			return lab.Qualifier{Code: r.Code, Words: r.Words}
		}
		out.Qualifiers = lab.QualifierSet{BelowRL: pick(s.BelowRl), Estimated: pick(s.Estimated),
			OverRange: pick(s.OverRange), ISFailure: pick(s.IsFailure)}
	}
	return out
}

// quantOut shows an analyte's rules with the defaults filled in; nil when the
// analyte has none.
func quantOut(a lab.Analyte) *oapi.AnalyteQuant {
	q := a.Quant
	if q == (lab.Quant{}) {
		return nil
	}
	out := &oapi.AnalyteQuant{}
	if q.InternalStandard != "" {
		is, w := oapi.Identifier(q.InternalStandard), q.ISWindow()
		out.InternalStandard, out.IsWindowLowPct, out.IsWindowHighPct = &is, &w.LowPct, &w.HighPct
	}
	unit := a.Unit
	if q.ReportingUnit != "" {
		unit = q.ReportingUnit
	}
	u := oapi.Unit(unit)
	out.ReportingUnit = &u
	if q.ReportingLimit > 0 {
		out.ReportingLimit = &q.ReportingLimit
	}
	if q.DetectionLimit > 0 {
		out.DetectionLimit = &q.DetectionLimit
	}
	r := q.Rounding()
	if r.UseDecimals {
		out.Decimals = &r.Decimals
	} else {
		sf := r.SignificantFigures
		if sf == 0 {
			sf = reported.DefaultSignificantFigures
		}
		out.SignificantFigures = &sf
	}
	f := q.QualifiersFilled()
	out.Qualifiers = &oapi.QualifierSet{
		BelowRl:   &oapi.ResultQualifier{Code: f.BelowRL.Code, Words: f.BelowRL.Words},
		Estimated: &oapi.ResultQualifier{Code: f.Estimated.Code, Words: f.Estimated.Words},
		OverRange: &oapi.ResultQualifier{Code: f.OverRange.Code, Words: f.OverRange.Words},
		IsFailure: &oapi.ResultQualifier{Code: f.ISFailure.Code, Words: f.ISFailure.Words},
	}
	if q.BlankLimitFractionOfLLOQ > 0 {
		out.BlankLimitFractionOfLloq = &q.BlankLimitFractionOfLLOQ
	}
	bs := oapi.BlankSubtractionNone
	if q.BlankSubtraction != "" {
		bs = oapi.AnalyteQuantBlankSubtraction(q.BlankSubtraction)
	}
	out.BlankSubtraction = &bs
	return out
}

// zeroIfNil returns *p, or the zero value when p is nil.
func zeroIfNil[T any](p *T) T {
	var z T
	if p == nil {
		return z
	}
	return *p
}

// prepFrom reads a sample's preparation.
func prepFrom(sm *oapi.RunSampleInput) lab.Prep {
	return lab.Prep{SampleAmount: zeroIfNil(sm.SampleAmount), SampleAmountUnit: string(zeroIfNil(sm.SampleAmountUnit)),
		FinalVolume: zeroIfNil(sm.FinalVolume), FinalVolumeUnit: string(zeroIfNil(sm.FinalVolumeUnit)),
		DryFraction: zeroIfNil(sm.DryFraction)}
}

// jsonPtr decodes a stored JSON document into T; nil when there is none.
func jsonPtr[T any](b []byte) *T {
	if len(b) == 0 {
		return nil
	}
	v := new(T)
	if err := json.Unmarshal(b, v); err != nil {
		return nil
	}
	return v
}

// sequenceFrom reads a run's sequence; nil when none was given.
func sequenceFrom(s *oapi.RunSequenceInput) *lab.RunSequence {
	if s == nil {
		return nil
	}
	out := &lab.RunSequence{Complete: s.Complete, Injections: make([]lab.RunInjection, 0, len(s.Injections))}
	for _, in := range s.Injections {
		out.Injections = append(out.Injections, lab.RunInjection{Position: in.Position, Kind: string(in.Kind), ID: string(in.ID),
			Time: timeOf(in.Time), Analyte: string(zeroIfNil(in.Analyte)), Nominal: zeroIfNil(in.Nominal),
			Responses: zeroIfNil(in.Responses), ISResponses: zeroIfNil(in.IsResponses), Judged: string(zeroIfNil(in.Judged))})
	}
	return out
}

// viaJSON converts v into a T with the same JSON form (the lab's and the
// spec's uncertainty types share their member names); nil when they do not.
func viaJSON[T any](v any) *T {
	b, err := json.Marshal(v)
	if err != nil {
		return nil
	}
	return jsonPtr[T](b)
}
