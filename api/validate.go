package api

import (
	"errors"
	"fmt"
	"mime"
	"net/http"
	"strings"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/getkin/kin-openapi/openapi3filter"
	"github.com/getkin/kin-openapi/routers"
	"github.com/getkin/kin-openapi/routers/gorillamux"
	"github.com/labstack/echo/v4"
	oapimw "github.com/oapi-codegen/echo-middleware"

	"curvekeeper/api/oapi"
	"curvekeeper/api/qaui"
	"curvekeeper/lab"
)

func init() {
	// The CSV layout is checked by decodeCSVRun, which names the line and
	// column of every breach; the schema sees the body as a string only.
	openapi3filter.RegisterBodyDecoder("text/csv", openapi3filter.PlainBodyDecoder)
	// A date-time is what oapi.Timestamp reads: RFC 3339 with T and Z in
	// either case (kin-openapi's own pattern knows upper case only) and no
	// leap second, which validationProblem answers with its own message.
	openapi3.DefineStringFormatValidator("date-time", openapi3.NewCallbackValidator(func(v string) error {
		_, err := oapi.ParseTimestamp(v)
		return err
	}))
}

// requestValidator checks every request against the OpenAPI document before
// a handler sees it: parameters, content type and body. Its failures become
// problem details naming each offending field.
func requestValidator(spec *specValidator) echo.MiddlewareFunc {
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			if qaui.IsPath(c.Request().URL.Path) {
				return next(c) // the QA pages check their own form input
			}
			if err := spec.query.check(c); err != nil {
				return err
			}
			if c.Request().Method == http.MethodPost && decodedRoutes[c.Path()] {
				return next(c) // decode.go: the route's own decode step validates
			}
			if err := spec.validate(c); err != nil {
				return err
			}
			return next(c)
		}
	}
}

// specValidator is kin-openapi's validation of a request against the spec,
// the answer for every request that no fast path accepted. The fast paths'
// tests ask it for its decision on the bodies they accept.
type specValidator struct {
	router routers.Router
	opts   *oapimw.Options
	query  queryParams // every route's declared query parameters
	// firstOnly is opts without MultiError: a body over multiLimit bytes is
	// answered with its first breach only (see bodycheck.go).
	firstOnly  *oapimw.Options
	multiLimit int
}

func newSpecValidator(doc *openapi3.T) (*specValidator, error) {
	router, err := gorillamux.NewRouter(doc)
	if err != nil {
		return nil, fmt.Errorf("api: route the spec: %w", err)
	}
	opts := &oapimw.Options{
		Options: openapi3filter.Options{
			MultiError:         true,
			AuthenticationFunc: openapi3filter.NoopAuthenticationFunc, // authMiddleware decides
		},
		SilenceServersWarning: true,
		DoNotValidateServers:  true,
		MultiErrorHandler: func(me openapi3.MultiError) *echo.HTTPError {
			return &echo.HTTPError{Code: http.StatusBadRequest, Internal: me}
		},
	}
	// A schema error's default message carries the offending value as
	// indented JSON: for an array over its maxItems, the whole array, a
	// copy of the body per error. The problem is built from each error's
	// pointer and reason, so the message is just these.
	opts.Options.WithCustomSchemaErrorFunc(schemaErrorMessage)
	firstOnly := *opts
	firstOnly.Options.MultiError = false
	return &specValidator{router: router, opts: opts, firstOnly: &firstOnly, multiLimit: multiErrorLimit, query: newQueryParams(doc)}, nil
}

// validate returns nil when the request satisfies the spec, or the problem
// (404, 405, 415 or 400) that answers it.
func (v *specValidator) validate(c echo.Context) error {
	route, _, ferr := v.router.FindRoute(c.Request())
	if ferr != nil {
		if errors.Is(ferr, routers.ErrMethodNotAllowed) {
			return newProblem(http.StatusMethodNotAllowed, "this path does not accept "+c.Request().Method)
		}
		return newProblem(http.StatusNotFound, "no such route: "+c.Request().URL.Path)
	}
	if p := checkContentType(c.Request(), route.Operation); p != nil {
		return p
	}
	opts, p := v.checkBody(c, route.Operation)
	if p != nil {
		return p
	}
	if he := oapimw.ValidateRequestFromContext(c, v.router, opts); he != nil {
		if err := c.Request().Context().Err(); err != nil {
			return deadlineProblem()
		}
		return validationProblem(he)
	}
	return nil
}

// checkContentType answers 415 for a body whose media type the operation
// does not accept.
func checkContentType(req *http.Request, op *openapi3.Operation) *problemError {
	if op == nil || op.RequestBody == nil || op.RequestBody.Value == nil {
		return nil
	}
	if req.ContentLength == 0 && req.Header.Get("Content-Type") == "" {
		return nil // a missing body is the schema's to refuse
	}
	mt, _, err := mime.ParseMediaType(req.Header.Get("Content-Type"))
	content := op.RequestBody.Value.Content
	if err == nil && content.Get(mt) != nil {
		return nil
	}
	accepted := make([]string, 0, len(content))
	for k := range content {
		accepted = append(accepted, k)
	}
	return newProblem(http.StatusUnsupportedMediaType,
		fmt.Sprintf("Content-Type %q is not accepted here; send %s", req.Header.Get("Content-Type"), strings.Join(accepted, " or ")))
}

// validationProblem turns the validator's errors into one 400 problem that
// lists each offending field by JSON pointer (body) or by "query:name",
// "path:name" or "header:name" (parameters). A body whose only breaches are
// leap seconds is well formed but names times the service cannot store: 422.
func validationProblem(he *echo.HTTPError) *problemError {
	var fields []ProblemField
	leapOnly := true
	var walk func(err error)
	walk = func(err error) {
		// A type assertion, not errors.As: MultiError's As method would also
		// match a RequestError that wraps one, and the parameter or body it
		// names would be lost.
		if me, ok := err.(openapi3.MultiError); ok {
			for _, e := range me {
				walk(e)
			}
			return
		}
		var re *openapi3filter.RequestError
		if errors.As(err, &re) {
			prefix := ""
			if re.Parameter != nil {
				prefix = re.Parameter.In + ":" + re.Parameter.Name
			}
			add := func(e error, fallback ...string) {
				f := fieldOf(prefix, e, fallback...)
				var leap *oapi.LeapSecondError
				if errors.As(e, &leap) {
					f.Detail = leap.Error()
				}
				leapOnly = leapOnly && leap != nil && prefix == ""
				fields = append(fields, f)
			}
			var inner openapi3.MultiError
			if errors.As(re.Err, &inner) {
				for _, e := range inner {
					add(e)
				}
				return
			}
			add(re.Err, re.Reason)
			return
		}
		leapOnly = false
		fields = append(fields, ProblemField{Pointer: "", Detail: firstLine(err.Error())})
	}
	if he.Internal != nil {
		walk(he.Internal)
	} else {
		fields = append(fields, ProblemField{Detail: fmt.Sprint(he.Message)})
	}
	detail := "the request does not match the API contract"
	if len(fields) == 1 {
		detail = fields[0].Detail
		if fields[0].Pointer != "" {
			detail = fields[0].Pointer + ": " + detail
		}
	}
	if len(fields) > 50 {
		fields = fields[:50]
	}
	if leapOnly && len(fields) > 0 {
		return newProblem(http.StatusUnprocessableEntity, detail, fields...)
	}
	return newProblem(http.StatusBadRequest, detail, fields...)
}

// fieldOf names the field a schema error is about.
func fieldOf(prefix string, err error, fallback ...string) ProblemField {
	var se *openapi3.SchemaError
	if errors.As(err, &se) {
		tokens := se.JSONPointer()
		anys := make([]any, len(tokens))
		for i, t := range tokens {
			anys[i] = t
		}
		ptr := lab.Pointer(anys...)
		reason := humanReason(se)
		if prefix != "" {
			return ProblemField{Pointer: prefix + ptr, Detail: reason}
		}
		if ptr == "" {
			ptr = "/"
		}
		return ProblemField{Pointer: ptr, Detail: reason}
	}
	msg := ""
	if err != nil {
		msg = humanMessage(firstLine(err.Error()))
	}
	if msg == "" && len(fallback) > 0 {
		msg = fallback[0]
	}
	if prefix == "" {
		prefix = "/"
	}
	return ProblemField{Pointer: prefix, Detail: msg}
}

func firstLine(s string) string {
	if i := strings.IndexByte(s, '\n'); i >= 0 {
		return s[:i]
	}
	return s
}
