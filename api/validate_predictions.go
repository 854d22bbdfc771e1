package api

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"mime"
	"net/http"

	"github.com/labstack/echo/v4"
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

	fastIdentifierMax  = 64     // Identifier maxLength (pattern ^[A-Za-z0-9][A-Za-z0-9._:-]{0,63}$)
	fastSamplesMax     = 1000   // PredictionRequest.samples maxItems (minItems 1)
	fastResponsesMax   = 1000   // Responses maxItems (minItems 1)
	fastResponseAbsMax = 1.0e15 // Response minimum -1e15, maximum 1e15
	fastDilutionMax    = 1.0e6  // Dilution exclusiveMinimum 0, maximum 1e6
	fastConfidenceMin  = 0.5    // Confidence minimum
	fastConfidenceMax  = 0.999  // Confidence maximum
)

// predictionFastPath reads the body of a prediction request, puts it back
// for the handler, and reports whether the request certainly satisfies the
// spec. A body over the limit is answered 413, as the other routes do.
func predictionFastPath(c echo.Context) (bool, error) {
	req := c.Request()
	if req.Body == nil {
		return false, nil
	}
	raw, err := io.ReadAll(req.Body)
	if err != nil {
		var mbe *http.MaxBytesError
		if errors.As(err, &mbe) {
			return false, newProblem(http.StatusRequestEntityTooLarge, fmt.Sprintf("the body is over the limit of %d bytes", mbe.Limit))
		}
		return false, fmt.Errorf("api: read prediction body: %w", err)
	}
	req.Body = io.NopCloser(bytes.NewReader(raw))
	if req.URL.RawQuery != "" || !isLowerUUID(c.Param("id")) {
		return false, nil
	}
	if mt, _, err := mime.ParseMediaType(req.Header.Get(echo.HeaderContentType)); err != nil || mt != echo.MIMEApplicationJSON {
		return false, nil
	}
	return predictionBodyOK(raw), nil
}

// predictionBodyOK reports whether raw is a PredictionRequest the spec
// accepts. Two passes: keysAndLiteralsOK checks that every member name is
// spelled exactly as the spec spells one (encoding/json alone would also
// take "Samples" for samples) and that no null, true or false appears (none
// is valid anywhere in this schema, and a typed decode cannot tell null from
// absent); then a typed decode refusing unknown members, and the bounds.
func predictionBodyOK(raw []byte) bool {
	if !keysAndLiteralsOK(raw) {
		return false
	}
	var req fastPredictionRequest
	dec := json.NewDecoder(bytes.NewReader(raw))
	dec.DisallowUnknownFields()
	if dec.Decode(&req) != nil || len(bytes.TrimSpace(raw[dec.InputOffset():])) != 0 {
		return false
	}
	if req.Samples == nil || len(*req.Samples) < 1 || len(*req.Samples) > fastSamplesMax {
		return false
	}
	if c := req.Confidence; c != nil && (*c < fastConfidenceMin || *c > fastConfidenceMax) {
		return false
	}
	for _, sm := range *req.Samples {
		if sm.ID == nil || !isIdentifier(*sm.ID) {
			return false
		}
		if sm.Responses == nil || len(*sm.Responses) < 1 || len(*sm.Responses) > fastResponsesMax {
			return false
		}
		for _, r := range *sm.Responses {
			if r < -fastResponseAbsMax || r > fastResponseAbsMax {
				return false
			}
		}
		if d := sm.Dilution; d != nil && (*d <= 0 || *d > fastDilutionMax) {
			return false
		}
	}
	return true
}

// fastPredictionRequest mirrors the PredictionRequest schema with pointers,
// so that a missing member is seen as missing.
type fastPredictionRequest struct {
	Confidence *float64 `json:"confidence"`
	Samples    *[]struct {
		ID        *string    `json:"id"`
		Responses *[]float64 `json:"responses"`
		Dilution  *float64   `json:"dilution"`
	} `json:"samples"`
}

// fastMemberNames are every member name of PredictionRequest and
// PredictionSample; they differ from each other ignoring case, so a name
// spelled exactly as one of them and known to its object's type (the typed
// decode checks that) is exactly that object's member.
var fastMemberNames = []string{"confidence", "samples", "id", "responses", "dilution"}

// keysAndLiteralsOK scans raw once, without decoding: every string followed
// by a colon (a member name) must be one of fastMemberNames, spelled without
// escapes, and no bare literal other than numbers may occur.
func keysAndLiteralsOK(raw []byte) bool {
	for i := 0; i < len(raw); i++ {
		switch ch := raw[i]; {
		case ch == '"':
			start := i + 1
			escaped := false
			for i++; i < len(raw) && raw[i] != '"'; i++ {
				if raw[i] == '\\' {
					escaped = true
					i++
				}
			}
			if i >= len(raw) {
				return false
			}
			name := raw[start:i]
			j := i + 1
			for j < len(raw) && (raw[j] == ' ' || raw[j] == '\t' || raw[j] == '\n' || raw[j] == '\r') {
				j++
			}
			if j < len(raw) && raw[j] == ':' && (escaped || !knownMember(name)) {
				return false
			}
		case ch == 'n' || ch == 't' || ch == 'f':
			return false // null, true or false outside a string
		}
	}
	return true
}

func knownMember(name []byte) bool {
	for _, k := range fastMemberNames {
		if string(name) == k {
			return true
		}
	}
	return false
}

// isIdentifier matches the spec's Identifier: ^[A-Za-z0-9][A-Za-z0-9._:-]{0,63}$.
func isIdentifier(s string) bool {
	if len(s) < 1 || len(s) > fastIdentifierMax {
		return false
	}
	for i := 0; i < len(s); i++ {
		ch := s[i]
		alnum := ch >= 'a' && ch <= 'z' || ch >= 'A' && ch <= 'Z' || ch >= '0' && ch <= '9'
		if !alnum && (i == 0 || (ch != '.' && ch != '_' && ch != ':' && ch != '-')) {
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
