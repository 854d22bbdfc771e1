package api

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"mime"
	"net/http"
	"strings"

	"github.com/labstack/echo/v4"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// The prediction route is the hot path of LIMS integrations: many small
// requests against cached curves. kin-openapi's validator decodes each body
// into generic maps and walks the schema, which the profile showed as a
// quarter of the route's CPU. predictionFastPath checks the same contract
// with typed decoding and explicit checks instead. It only ever accepts:
// anything it does not accept goes on to the spec's validator, which gives
// the answer (and its problem details) as before. So the fast path must
// never accept what the spec refuses; validate_predictions_test.go checks
// its constants against the spec and its decisions against the validator.
const (
	predictionRoute = "/v1/curves/:id/predictions"

	fastIdentifierMax  = lab.MaxNameLen // Identifier maxLength (pattern ^[A-Za-z0-9][A-Za-z0-9._:-]{0,63}$)
	fastSamplesMax     = 1000           // PredictionRequest.samples maxItems (minItems 1)
	fastResponsesMax   = 1000           // Responses maxItems (minItems 1)
	fastResponseAbsMax = 1.0e15         // Response minimum -1e15, maximum 1e15
	fastDilutionMax    = 1.0e6          // Dilution exclusiveMinimum 0, maximum 1e6
	fastConfidenceMin  = 0.5            // Confidence minimum
	fastConfidenceMax  = 0.999          // Confidence maximum
)

// predictionFastPath reads the body of a prediction request, puts it back
// for the handler, and reports whether the request certainly satisfies the
// spec. A body over the limit is answered 413, as the other routes do.
func predictionFastPath(c echo.Context) (*oapi.PredictionRequest, bool, error) {
	req := c.Request()
	if req.Body == nil {
		return nil, false, nil
	}
	raw, err := readBody(req)
	if err != nil {
		var mbe *http.MaxBytesError
		if errors.As(err, &mbe) {
			return nil, false, newProblem(http.StatusRequestEntityTooLarge, fmt.Sprintf("the body is over the limit of %d bytes", mbe.Limit))
		}
		return nil, false, fmt.Errorf("api: read prediction body: %w", err)
	}
	req.Body = io.NopCloser(bytes.NewReader(raw))
	if req.URL.RawQuery != "" || !isLowerUUID(c.Param("id")) {
		return nil, false, nil
	}
	if mt, _, err := mime.ParseMediaType(req.Header.Get(echo.HeaderContentType)); err != nil || mt != echo.MIMEApplicationJSON {
		return nil, false, nil
	}
	body, ok := decodeFastPrediction(raw)
	return body, ok, nil
}

// predictionBodyOK reports whether raw is a PredictionRequest the spec
// accepts.
func predictionBodyOK(raw []byte) bool {
	_, ok := decodeFastPrediction(raw)
	return ok
}

// decodeFastPrediction is predictionBodyOK returning, when it accepts, the
// request it decoded, so that the handler need not decode the body again
// (see decode.go). It parses the body itself in one pass (see
// fastParser) and then checks the schema's bounds.
func decodeFastPrediction(raw []byte) (*oapi.PredictionRequest, bool) {
	p := fastParser{raw: raw}
	out, ok := p.request()
	if !ok || !withinBounds(out) {
		return nil, false
	}
	return out, true
}

// withinBounds checks a decoded request against the schema's bounds (the
// parser has checked the required members).
func withinBounds(req *oapi.PredictionRequest) bool {
	if len(req.Samples) < 1 || len(req.Samples) > fastSamplesMax {
		return false
	}
	if c := req.Confidence; c != nil && (*c < fastConfidenceMin || *c > fastConfidenceMax) {
		return false
	}
	for _, sm := range req.Samples {
		if !isIdentifier(sm.ID) || !responsesOK(sm.Responses) || !dilutionOK(sm.Dilution) {
			return false
		}
	}
	return true
}

// responsesOK checks replicate readings against the spec's Responses and
// Response.
func responsesOK(rs []float64) bool {
	if len(rs) < 1 || len(rs) > fastResponsesMax {
		return false
	}
	for _, r := range rs {
		if r < -fastResponseAbsMax || r > fastResponseAbsMax {
			return false
		}
	}
	return true
}

// dilutionOK checks an optional dilution against the spec's Dilution.
func dilutionOK(d *float64) bool { return d == nil || (*d > 0 && *d <= fastDilutionMax) }

// The member names of PredictionRequest and PredictionSample, the only
// ones fastParser knows; they differ from each other ignoring case.
const (
	memberConfidence = "confidence"
	memberSamples    = "samples"
	memberID         = "id"
	memberResponses  = "responses"
	memberDilution   = "dilution"
)

var fastMemberNames = []string{memberConfidence, memberSamples, memberID, memberResponses, memberDilution}

// isIdentifier matches the spec's Identifier: ^[A-Za-z0-9][A-Za-z0-9._:-]{0,63}$.
func isIdentifier(s string) bool { return isName(s, fastIdentifierMax, true, "._:-") }

// isName reports whether s is 1 to max bytes, each an ASCII letter or digit
// or one of extra, the first a letter or digit when alnumFirst: the shape of
// every name pattern in the spec.
func isName(s string, max int, alnumFirst bool, extra string) bool {
	if len(s) < 1 || len(s) > max {
		return false
	}
	for i := 0; i < len(s); i++ {
		ch := s[i]
		alnum := ch >= 'a' && ch <= 'z' || ch >= 'A' && ch <= 'Z' || ch >= '0' && ch <= '9'
		if !alnum && (alnumFirst && i == 0 || strings.IndexByte(extra, ch) < 0) {
			return false
		}
	}
	return true
}

// isLowerUUID matches the canonical lower-case form of a UUID, which the
// spec's format uuid accepts.
func isLowerUUID(s string) bool {
	if len(s) != 36 {
		return false
	}
	for i := 0; i < len(s); i++ {
		ch := s[i]
		switch i {
		case 8, 13, 18, 23:
			if ch != '-' {
				return false
			}
		default:
			if (ch < '0' || ch > '9') && (ch < 'a' || ch > 'f') {
				return false
			}
		}
	}
	return true
}
