package api

import (
	"strconv"

	"curvekeeper/api/oapi"
)

// fastParser reads a prediction request body in one pass, without
// reflection, into the value encoding/json would decode from it. It is
// deliberately narrow: it accepts only bodies made of the schema's members,
// spelled exactly, each once, with the types the schema gives (strings
// without escapes, numbers in JSON's grammar, arrays and objects); anything
// else (null, true, false, escapes, duplicate or unknown members, trailing
// data) makes it give up, and the request goes to the spec's validator as
// before. validate_predictions_test.go checks against kin-openapi and
// encoding/json that whatever it accepts the spec accepts and encoding/json
// decodes to the same value.
type fastParser struct {
	raw []byte
	i   int
}

func (p *fastParser) ws() {
	for p.i < len(p.raw) {
		switch p.raw[p.i] {
		case ' ', '\t', '\n', '\r':
			p.i++
		default:
			return
		}
	}
}

// byte consumes ch (after white space) or reports that it is not next.
func (p *fastParser) byte(ch byte) bool {
	p.ws()
	if p.i < len(p.raw) && p.raw[p.i] == ch {
		p.i++
		return true
	}
	return false
}

// peek returns the next byte after white space, 0 at the end.
func (p *fastParser) peek() byte {
	p.ws()
	if p.i < len(p.raw) {
		return p.raw[p.i]
	}
	return 0
}

// str reads a string without escapes or control characters and returns
// its bytes (a sub-slice of raw).
func (p *fastParser) str() ([]byte, bool) {
	if !p.byte('"') {
		return nil, false
	}
	start := p.i
	for p.i < len(p.raw) {
		ch := p.raw[p.i]
		switch {
		case ch == '"':
			s := p.raw[start:p.i]
			p.i++
			return s, true
		case ch == '\\' || ch < 0x20:
			return nil, false
		}
		p.i++
	}
	return nil, false
}

// number reads a number in JSON's grammar:
// -? (0 | [1-9][0-9]*) (\.[0-9]+)? ([eE][+-]?[0-9]+)?
// A number out of float64's range gives up, as encoding/json refuses it.
func (p *fastParser) number() (float64, bool) {
	p.ws()
	start := p.i
	raw := p.raw
	i := p.i
	digits := func() int {
		n := 0
		for i < len(raw) && raw[i] >= '0' && raw[i] <= '9' {
			i++
			n++
		}
		return n
	}
	if i < len(raw) && raw[i] == '-' {
		i++
	}
	switch {
	case i < len(raw) && raw[i] == '0':
		i++
	case digits() == 0:
		return 0, false
	}
	if i < len(raw) && raw[i] == '.' {
		i++
		if digits() == 0 {
			return 0, false
		}
	}
	if i < len(raw) && (raw[i] == 'e' || raw[i] == 'E') {
		i++
		if i < len(raw) && (raw[i] == '+' || raw[i] == '-') {
			i++
		}
		if digits() == 0 {
			return 0, false
		}
	}
	v, err := strconv.ParseFloat(string(raw[start:i]), 64)
	if err != nil {
		return 0, false
	}
	p.i = i
	return v, true
}

// members reads an object, calling member for each name; member reads the
// value and reports whether it took it.
func (p *fastParser) members(member func(name []byte) bool) bool {
	if !p.byte('{') {
		return false
	}
	if p.byte('}') {
		return true
	}
	for {
		name, ok := p.str()
		if !ok || !p.byte(':') || !member(name) {
			return false
		}
		if p.byte('}') {
			return true
		}
		if !p.byte(',') {
			return false
		}
	}
}

// elements reads an array, calling element for each item.
func (p *fastParser) elements(element func() bool) bool {
	if !p.byte('[') {
		return false
	}
	if p.byte(']') {
		return true
	}
	for {
		if !element() {
			return false
		}
		if p.byte(']') {
			return true
		}
		if !p.byte(',') {
			return false
		}
	}
}

// request reads the whole body as a PredictionRequest with its required
// members present.
func (p *fastParser) request() (*oapi.PredictionRequest, bool) {
	out := &oapi.PredictionRequest{}
	var haveConfidence, haveSamples bool
	ok := p.members(func(name []byte) bool {
		switch string(name) {
		case memberConfidence:
			if haveConfidence {
				return false
			}
			haveConfidence = true
			v, ok := p.number()
			out.Confidence = &v
			return ok
		case memberSamples:
			if haveSamples || p.peek() != '[' {
				return false
			}
			haveSamples = true
			out.Samples = make([]oapi.PredictionSample, 0, 16)
			return p.elements(func() bool {
				sm, ok := p.sample()
				out.Samples = append(out.Samples, sm)
				return ok
			})
		}
		return false
	})
	if !ok || !haveSamples || !p.end() {
		return nil, false
	}
	return out, true
}

// sample reads one PredictionSample with id and responses present.
func (p *fastParser) sample() (oapi.PredictionSample, bool) {
	var (
		sm                       oapi.PredictionSample
		haveID, haveR, haveDilut bool
	)
	ok := p.members(func(name []byte) bool {
		switch string(name) {
		case memberID:
			if haveID {
				return false
			}
			haveID = true
			s, ok := p.str()
			sm.ID = string(s)
			return ok
		case memberResponses:
			if haveR {
				return false
			}
			haveR = true
			var ok bool
			sm.Responses, ok = p.responses()
			return ok
		case memberDilution:
			if haveDilut {
				return false
			}
			haveDilut = true
			v, ok := p.number()
			sm.Dilution = &v
			return ok
		}
		return false
	})
	return sm, ok && haveID && haveR
}

// responses reads an array of numbers (Responses, in either request). An
// empty array gives up here: the spec's Responses refuses it (minItems 1).
func (p *fastParser) responses() ([]float64, bool) {
	if p.peek() != '[' {
		return nil, false
	}
	out := make([]float64, 0, 4)
	ok := p.elements(func() bool {
		v, ok := p.number()
		out = append(out, v)
		return ok
	})
	return out, ok && len(out) > 0
}
