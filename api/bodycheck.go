package api

import (
	"bytes"
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
// checks its shape against op's schema (shapeCheck: an array over its
// maxItems, a member a closed object does not name, data after the JSON
// value), without decoding it. It returns the validator options for the
// body's size, or the problem that answers the request: 400 for a breach of
// shape, 503 when the request's deadline has passed.
func (v *specValidator) checkBody(c echo.Context, op *openapi3.Operation) (*oapimw.Options, *problemError) {
	req := c.Request()
	if err := req.Context().Err(); err != nil {
		return nil, deadlineProblem()
	}
	if req.Body == nil || req.Body == http.NoBody || !jsonContentType(req.Header.Get(echo.HeaderContentType)) {
		return v.opts, nil
	}
	raw, err := readBody(req)
	if err != nil {
		// The validator meets the same error (a body over the limit, a broken
		// connection) and answers it as before.
		req.Body = io.NopCloser(io.MultiReader(bytes.NewReader(raw), errReader{err}))
		return v.opts, nil
	}
	req.Body = io.NopCloser(bytes.NewReader(raw))
	if p := shapeCheck(raw, jsonBodySchema(op)); p != nil {
		return nil, p
	}
	if len(raw) > v.multiLimit {
		return v.firstOnly, nil
	}
	return v.opts, nil
}

// readBody reads a request body into one buffer sized by Content-Length when
// the request states it (the body limit has bounded it), instead of growing
// one by doubling: a 4 MB body then costs 4 MB, not about 8.
func readBody(req *http.Request) ([]byte, error) {
	n := req.ContentLength
	if n <= 0 || n > maxPreallocatedBody {
		return io.ReadAll(req.Body)
	}
	buf := make([]byte, n)
	k, err := io.ReadFull(req.Body, buf)
	if err != nil {
		return buf[:k], err // shorter than stated: the caller answers the read error
	}
	rest, err := io.ReadAll(req.Body) // longer than stated: net/http stops at n; other readers may not
	if len(rest) > 0 {
		buf = append(buf, rest...)
	}
	return buf, err
}

// maxPreallocatedBody bounds what readBody allocates on a client's word
// alone; the body limit middleware has already refused larger ones.
const maxPreallocatedBody = 64 << 20

// jsonBodySchema is the schema of op's application/json body, or nil.
func jsonBodySchema(op *openapi3.Operation) *openapi3.Schema {
	if op == nil || op.RequestBody == nil || op.RequestBody.Value == nil {
		return nil
	}
	mt := op.RequestBody.Value.Content.Get(echo.MIMEApplicationJSON)
	if mt == nil || mt.Schema == nil {
		return nil
	}
	return mt.Schema.Value
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
