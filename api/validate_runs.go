package api

import (
	"bytes"
	"io"
	"mime"
	"strings"

	"github.com/labstack/echo/v4"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// Instruments post runs as JSON far more often than as CSV, and for
// POST /v1/runs the profile showed kin-openapi's validator (generic decoding
// and the schema walk) as a seventh of the route's CPU, and the handler's
// second decode of the same body as another sixteenth. runFastPath checks the
// JSON run with typed decoding and explicit checks instead, under the same
// rule as the prediction fast path (see validate_predictions.go): it only
// ever accepts; anything it does not accept goes on to the spec's validator,
// which answers as before. validate_runs_test.go checks its constants
// against the spec and its decisions against the validator.
const (
	runsRoute = "/v1/runs"

	headerIdempotencyKey = "Idempotency-Key"

	fastStandardsMax     = 1000                     // RunRequest.standards maxItems (minItems 1)
	fastRunSamplesMax    = 1000                     // RunRequest.samples maxItems (no minItems)
	fastOperatorMax      = 128                      // Operator maxLength (pattern ^[A-Za-z0-9][A-Za-z0-9._:@-]{0,127}$)
	fastConcentrationMax = 1.0e12                   // Concentration minimum 0, maximum 1e12
	fastIdemKeyMax       = lab.MaxIdempotencyKeyLen // Idempotency-Key maxLength (pattern ^[A-Za-z0-9._:-]{1,128}$)
)

// The member names of RunRequest, StandardInput and RunSampleInput that the
// prediction's names do not already give (memberSamples, memberID,
// memberResponses, memberDilution); none differs from another only in case,
// so encoding/json's case-insensitive matching finds the same field as the
// exact match here.
const (
	memberMethod        = "method"
	memberInstrument    = "instrument"
	memberAcquiredAt    = "acquired_at"
	memberOperator      = "operator"
	memberStandards     = "standards"
	memberAnalyte       = "analyte"
	memberLevel         = "level"
	memberConcentration = "concentration"
)

var fastRunMemberNames = []string{memberMethod, memberInstrument, memberAcquiredAt, memberOperator,
	memberStandards, memberSamples, memberAnalyte, memberLevel, memberConcentration, memberID, memberResponses, memberDilution}

// runFastPath reports whether a POST /v1/runs request certainly satisfies
// the spec. It looks only at JSON runs with no query (the CSV run's
// parameters, which a JSON run must not carry, are the spec's and the
// handler's to judge) and at most one valid Idempotency-Key; only then does
// it read the body, and it always puts the body back as it read it.
func runFastPath(c echo.Context) (*oapi.RunRequest, bool, error) {
	req := c.Request()
	if req.Body == nil || req.URL.RawQuery != "" || !jsonContentType(req.Header.Get(echo.HeaderContentType)) {
		return nil, false, nil
	}
	// kin-openapi reads the header's values from the map as this does; the
	// generated wrapper refuses more than one value.
	if keys, ok := req.Header[headerIdempotencyKey]; ok && (len(keys) != 1 || !isIdempotencyKey(keys[0])) {
		return nil, false, nil
	}
	raw, err := readBody(req)
	if err != nil {
		// The validator reads the same bytes and then meets the same error
		// (a body over the limit, a broken connection), and answers it as
		// before.
		req.Body = io.NopCloser(io.MultiReader(bytes.NewReader(raw), errReader{err}))
		return nil, false, nil
	}
	req.Body = io.NopCloser(bytes.NewReader(raw))
	run, ok := decodeFastRun(raw)
	return run, ok, nil
}

// jsonContentType reports whether ct is application/json, possibly with
// parameters, spelled so that every reader of it agrees: the validator and
// echo's binder compare media types without case, but the generated handler
// takes the body as JSON only if the header starts with "application/json".
func jsonContentType(ct string) bool {
	if ct == echo.MIMEApplicationJSON {
		return true
	}
	mt, _, err := mime.ParseMediaType(ct)
	return err == nil && mt == echo.MIMEApplicationJSON && strings.HasPrefix(ct, echo.MIMEApplicationJSON)
}

// errReader returns its error on every read.
type errReader struct{ err error }

func (r errReader) Read([]byte) (int, error) { return 0, r.err }

// decodeFastRun returns the run in raw when it is certainly one the spec
// accepts, decoded as encoding/json would decode it.
func decodeFastRun(raw []byte) (*oapi.RunRequest, bool) {
	p := fastParser{raw: raw}
	out, ok := p.run()
	if !ok || !runWithinBounds(out) {
		return nil, false
	}
	return out, true
}

// runWithinBounds checks a decoded run against the schema's patterns and
// bounds (the parser has checked the required members and acquired_at).
func runWithinBounds(run *oapi.RunRequest) bool {
	if !isIdentifier(run.Method) || !isIdentifier(run.Instrument) {
		return false
	}
	if run.Operator != nil && !isOperator(*run.Operator) {
		return false
	}
	if len(run.Standards) < 1 || len(run.Standards) > fastStandardsMax {
		return false
	}
	for _, st := range run.Standards {
		if !isIdentifier(st.Analyte) || !isIdentifier(st.Level) || !responsesOK(st.Responses) {
			return false
		}
		if st.Concentration < 0 || st.Concentration > fastConcentrationMax {
			return false
		}
	}
	if run.Samples == nil {
		return true
	}
	if len(*run.Samples) > fastRunSamplesMax {
		return false
	}
	for _, sm := range *run.Samples {
		if !isIdentifier(sm.ID) || !isIdentifier(sm.Analyte) || !responsesOK(sm.Responses) || !dilutionOK(sm.Dilution) {
			return false
		}
	}
	return true
}

// isOperator matches the spec's Operator: ^[A-Za-z0-9][A-Za-z0-9._:@-]{0,127}$.
func isOperator(s string) bool { return isName(s, fastOperatorMax, true, "._:@-") }

// isIdempotencyKey matches the header's schema: ^[A-Za-z0-9._:-]{1,128}$.
func isIdempotencyKey(s string) bool { return isName(s, fastIdemKeyMax, false, "._:-") }

// isDateTimeShape reports whether s matches kin-openapi's date-time pattern
// ^[0-9]{4}-(0[1-9]|10|11|12)-(0[1-9]|[12][0-9]|3[01])T([0-1][0-9]|2[0-3]):[0-5][0-9]:([0-5][0-9]|60)(\.[0-9]+)?(Z|(\+|-)([0-1][0-9]|2[0-3]):[0-5][0-9])$
// without its leap second (seconds 00 to 59 only). Whether the day exists in
// its month is left to time's parser, which refuses what kin-openapi's
// check of the day refuses.
func isDateTimeShape(s []byte) bool {
	const fixed = len("2006-01-02T15:04:05")
	if len(s) < fixed+1 {
		return false
	}
	digits := func(b []byte) bool {
		for _, ch := range b {
			if ch < '0' || ch > '9' {
				return false
			}
		}
		return true
	}
	two := func(b []byte, max int) bool { // two digits, 00 to max
		return digits(b) && int(b[0]-'0')*10+int(b[1]-'0') <= max
	}
	if !digits(s[0:4]) || s[4] != '-' || s[7] != '-' || s[10] != 'T' || s[13] != ':' || s[16] != ':' {
		return false
	}
	if !two(s[5:7], 12) || !two(s[8:10], 31) || s[5] == '0' && s[6] == '0' || s[8] == '0' && s[9] == '0' {
		return false // month 01 to 12, day 01 to 31
	}
	if !two(s[11:13], 23) || !two(s[14:16], 59) || !two(s[17:19], 59) {
		return false
	}
	rest := s[fixed:]
	if rest[0] == '.' {
		n := 1
		for n < len(rest) && rest[n] >= '0' && rest[n] <= '9' {
			n++
		}
		if n == 1 {
			return false
		}
		rest = rest[n:]
	}
	switch {
	case len(rest) == 1 && rest[0] == 'Z':
		return true
	case len(rest) == 6 && (rest[0] == '+' || rest[0] == '-') && rest[3] == ':':
		return two(rest[1:3], 23) && two(rest[4:6], 59)
	}
	return false
}
