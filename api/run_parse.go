package api

import (
	"time"

	"curvekeeper/api/oapi"
)

// run reads the whole body as a RunRequest with its required members
// present, as fastParser reads a prediction request (see request): only the
// schema's members, spelled exactly, each once; anything else gives up.
func (p *fastParser) run() (*oapi.RunRequest, bool) {
	out := &oapi.RunRequest{}
	var have memberSet
	ok := p.members(func(name []byte) bool {
		switch string(name) {
		case memberMethod:
			return have.add(0) && p.strInto(&out.Method)
		case memberInstrument:
			return have.add(1) && p.strInto(&out.Instrument)
		case memberAcquiredAt:
			return have.add(2) && p.dateTimeInto(&out.AcquiredAt.Time)
		case memberOperator:
			out.Operator = new(string)
			return have.add(3) && p.strInto(out.Operator)
		case memberStandards:
			if !have.add(4) || p.peek() != '[' {
				return false
			}
			out.Standards = make([]oapi.StandardInput, 0, 16)
			return p.elements(func() bool {
				st, ok := p.standard()
				out.Standards = append(out.Standards, st)
				return ok
			})
		case memberSamples:
			if !have.add(5) || p.peek() != '[' {
				return false
			}
			// An empty array is valid (no minItems): encoding/json makes it a
			// non-nil empty slice, and so does this.
			samples := make([]oapi.RunSampleInput, 0, 8)
			ok := p.elements(func() bool {
				sm, ok := p.runSample()
				samples = append(samples, sm)
				return ok
			})
			out.Samples = &samples
			return ok
		}
		return false
	})
	// method, instrument, acquired_at and standards are required.
	if !ok || !have.all(0, 1, 2, 4) || !p.end() {
		return nil, false
	}
	return out, true
}

// standard reads one StandardInput with all its (required) members.
func (p *fastParser) standard() (oapi.StandardInput, bool) {
	var (
		st   oapi.StandardInput
		have memberSet
	)
	ok := p.members(func(name []byte) bool {
		switch string(name) {
		case memberAnalyte:
			return have.add(0) && p.strInto(&st.Analyte)
		case memberLevel:
			return have.add(1) && p.strInto(&st.Level)
		case memberConcentration:
			return have.add(2) && p.numberInto(&st.Concentration)
		case memberResponses:
			return have.add(3) && p.responsesInto(&st.Responses)
		}
		return false
	})
	return st, ok && have.all(0, 1, 2, 3)
}

// runSample reads one RunSampleInput with id, analyte and responses present.
func (p *fastParser) runSample() (oapi.RunSampleInput, bool) {
	var (
		sm   oapi.RunSampleInput
		have memberSet
	)
	ok := p.members(func(name []byte) bool {
		switch string(name) {
		case memberID:
			return have.add(0) && p.strInto(&sm.ID)
		case memberAnalyte:
			return have.add(1) && p.strInto(&sm.Analyte)
		case memberResponses:
			return have.add(2) && p.responsesInto(&sm.Responses)
		case memberDilution:
			sm.Dilution = new(float64)
			return have.add(3) && p.numberInto(sm.Dilution)
		}
		return false
	})
	return sm, ok && have.all(0, 1, 2)
}

// dateTimeInto reads a string in the common shape of RFC 3339 (upper-case
// T and Z, no leap second; isDateTimeShape) and stores the time that
// oapi.Timestamp's UnmarshalJSON, which the decoder calls, makes of it
// (oapi.ParseTimestamp: cut to the microsecond). Any other shape (lower
// case, a leap second) gives up here, and the spec's validator and the
// decoder answer it.
func (p *fastParser) dateTimeInto(dst *time.Time) bool {
	p.ws()
	s, ok := p.str()
	if !ok || !isDateTimeShape(s) {
		return false
	}
	t, err := oapi.ParseTimestamp(string(s))
	*dst = t
	return err == nil
}

// strInto reads a string (see str) into dst.
func (p *fastParser) strInto(dst *string) bool {
	s, ok := p.str()
	*dst = string(s)
	return ok
}

// numberInto reads a number into dst.
func (p *fastParser) numberInto(dst *float64) bool {
	v, ok := p.number()
	*dst = v
	return ok
}

// responsesInto reads a Responses array into dst.
func (p *fastParser) responsesInto(dst *[]float64) bool {
	v, ok := p.responses()
	*dst = v
	return ok
}

// end reports whether only white space is left.
func (p *fastParser) end() bool {
	p.ws()
	return p.i == len(p.raw)
}

// memberSet records which members of one object have been read, by index.
type memberSet uint8

// add marks member i read and reports whether it was new.
func (m *memberSet) add(i uint) bool {
	if *m&(1<<i) != 0 {
		return false
	}
	*m |= 1 << i
	return true
}

// all reports whether every member listed has been read.
func (m memberSet) all(idx ...uint) bool {
	for _, i := range idx {
		if m&(1<<i) == 0 {
			return false
		}
	}
	return true
}
