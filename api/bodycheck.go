package api

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"net/http"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/labstack/echo/v4"
	oapimw "github.com/oapi-codegen/echo-middleware"

	"curvekeeper/lab"
)

// multiErrorLimit is the largest body whose every breach of the spec is
// collected and listed (kin-openapi's MultiError). A larger body is answered
// with its first breach only: the validator then stops at the first array
// over its maxItems instead of judging each of its items, so that the cost
// of refusing a body up to the size limit stays bounded (see
// BenchmarkInvalidRunBody).
const multiErrorLimit = 64 << 10

// checkBody reads a JSON request body before the spec's validator does and
// refuses data after its JSON value (400: the body must be one JSON value;
// encoding/json's decoder would stop at the end of the first one and ignore
// the rest). It returns the validator options for the body's size, or the
// problem that answers the request: 400 for trailing data, 503 when the
// request's deadline has passed.
func (v *specValidator) checkBody(c echo.Context) (*oapimw.Options, *problemError) {
	req := c.Request()
	if err := req.Context().Err(); err != nil {
		return nil, deadlineProblem()
	}
	if req.Body == nil || req.Body == http.NoBody || !jsonContentType(req.Header.Get(echo.HeaderContentType)) {
		return v.opts, nil
	}
	raw, err := io.ReadAll(req.Body)
	if err != nil {
		// The validator meets the same error (a body over the limit, a broken
		// connection) and answers it as before.
		req.Body = io.NopCloser(io.MultiReader(bytes.NewReader(raw), errReader{err}))
		return v.opts, nil
	}
	req.Body = io.NopCloser(bytes.NewReader(raw))
	if end, ok := trailingData(raw); ok {
		return nil, newProblem(http.StatusBadRequest,
			fmt.Sprintf("the body holds data after its JSON value (from byte %d); send exactly one JSON value", end),
			ProblemField{Pointer: "/", Detail: "data after the JSON value"})
	}
	if len(raw) > v.multiLimit {
		return v.firstOnly, nil
	}
	return v.opts, nil
}

// trailingData reports whether raw holds one well-formed JSON value followed
// by anything but white space, and where that begins. A body that is not
// well-formed is the validator's to refuse.
func trailingData(raw []byte) (int64, bool) {
	dec := json.NewDecoder(bytes.NewReader(raw))
	var v json.RawMessage
	if err := dec.Decode(&v); err != nil {
		return 0, false
	}
	end := dec.InputOffset()
	if len(bytes.TrimLeft(raw[end:], " \t\r\n")) == 0 {
		return 0, false
	}
	return end, true
}

// deadlineProblem answers a request whose deadline passed while its body
// was checked: 503 with Retry-After is what the service answers when it
// cannot serve a request now.
func deadlineProblem() *problemError {
	return newProblem(http.StatusServiceUnavailable, "the request's deadline passed before its body was checked")
}

// schemaErrorMessage is a schema error's message without the offending
// value: its JSON pointer and its reason.
func schemaErrorMessage(se *openapi3.SchemaError) string {
	tokens := se.JSONPointer()
	anys := make([]any, len(tokens))
	for i, t := range tokens {
		anys[i] = t
	}
	return "Error at \"" + lab.Pointer(anys...) + "\": " + se.Reason
}
