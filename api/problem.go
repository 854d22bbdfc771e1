package api

import (
	"encoding/json"
	"errors"
	"log/slog"
	"net/http"
	"strconv"
	"strings"

	"github.com/labstack/echo/v4"

	"curvekeeper/api/qaui"
	"curvekeeper/lab"
)

// Problem is an RFC 9457 problem details object.
type Problem struct {
	Type      string         `json:"type"`
	Title     string         `json:"title"`
	Status    int            `json:"status"`
	Detail    string         `json:"detail"`
	Instance  string         `json:"instance,omitempty"`
	RequestID string         `json:"request_id,omitempty"`
	Errors    []ProblemField `json:"errors,omitempty"`
}

// ProblemField names one offending input by JSON pointer.
type ProblemField struct {
	Pointer string `json:"pointer"`
	Detail  string `json:"detail"`
}

// problemTypeBase prefixes every problem type: a URN, since the types are
// identifiers, not pages to fetch.
const problemTypeBase = "urn:curvekeeper:problem:"

// problemTypes gives each status its problem type slug and title.
var problemTypes = map[int][2]string{
	http.StatusBadRequest:            {"bad-request", "Bad request"},
	http.StatusUnauthorized:          {"unauthorized", "Unauthorized"},
	http.StatusForbidden:             {"forbidden", "Forbidden"},
	http.StatusNotFound:              {"not-found", "Not found"},
	http.StatusMethodNotAllowed:      {"method-not-allowed", "Method not allowed"},
	http.StatusConflict:              {"conflict", "Conflict"},
	http.StatusRequestEntityTooLarge: {"too-large", "Request body too large"},
	http.StatusUnsupportedMediaType:  {"unsupported-media-type", "Unsupported media type"},
	http.StatusUnprocessableEntity:   {"invalid", "Invalid input"},
	http.StatusTooManyRequests:       {"rate-limited", "Too many requests"},
	http.StatusInternalServerError:   {"internal", "Internal error"},
	http.StatusServiceUnavailable:    {"unavailable", "Service unavailable"},
	http.StatusGatewayTimeout:        {"timeout", "Request timed out"},
}

// kindStatus is the one table that maps error kinds to HTTP status.
var kindStatus = map[lab.Kind]int{
	lab.KindInternal:    http.StatusInternalServerError,
	lab.KindInvalid:     http.StatusUnprocessableEntity,
	lab.KindNotFound:    http.StatusNotFound,
	lab.KindConflict:    http.StatusConflict,
	lab.KindUnavailable: http.StatusServiceUnavailable,
	lab.KindForbidden:   http.StatusForbidden,
}

// StatusOf returns the HTTP status for err.
func StatusOf(err error) int {
	var he *echo.HTTPError
	if errors.As(err, &he) {
		return he.Code
	}
	var pe *problemError
	if errors.As(err, &pe) {
		return pe.p.Status
	}
	var le *lab.Error
	if errors.As(err, &le) {
		return statusOfKind(le.Kind, le.In, le.ShortOfData)
	}
	return http.StatusInternalServerError
}

// statusOfKind is kindStatus, but for one case: an invalid query parameter
// is a malformed request (400), as the spec's validator answers for one,
// unless the parameters are well-formed and the data fall short (422).
func statusOfKind(k lab.Kind, in lab.Place, shortOfData bool) int {
	if k == lab.KindInvalid && in == lab.InQuery && !shortOfData {
		return http.StatusBadRequest
	}
	return kindStatus[k]
}

// placePrefix names where a parameter was given in a problem's pointer.
var placePrefix = map[lab.Place]string{lab.InQuery: "query:", lab.InPath: "path:", lab.InHeader: "header:"}

// pointerOf is the problem pointer of a field given in place in: the JSON
// pointer for the body, "query:name" and the like for a parameter.
func pointerOf(in lab.Place, field string) string {
	if p, ok := placePrefix[in]; ok {
		return p + strings.TrimPrefix(field, "/")
	}
	return field
}

// problemError carries a ready problem through Echo's error path.
type problemError struct{ p Problem }

func (e *problemError) Error() string { return e.p.Title + ": " + e.p.Detail }

// newProblem builds a problem of the given status.
func newProblem(status int, detail string, fields ...ProblemField) *problemError {
	t, ok := problemTypes[status]
	if !ok {
		t = [2]string{strconv.Itoa(status), http.StatusText(status)}
	}
	return &problemError{Problem{Type: problemTypeBase + t[0], Title: t[1], Status: status, Detail: detail, Errors: fields}}
}

// problemFor turns any error into the problem the client sees. Internal
// errors say only "internal error"; the cause goes to the log.
func problemFor(err error) Problem {
	var pe *problemError
	if errors.As(err, &pe) {
		return pe.p
	}
	var he *echo.HTTPError
	if errors.As(err, &he) {
		detail := http.StatusText(he.Code)
		if m, ok := he.Message.(string); ok && he.Code < 500 {
			detail = m
		}
		return newProblem(he.Code, detail).p
	}
	status := StatusOf(err)
	if status >= 500 {
		if status == http.StatusServiceUnavailable {
			return newProblem(status, "the database cannot be reached; retry later").p
		}
		return newProblem(http.StatusInternalServerError, "internal error").p
	}
	var se *lab.Error
	if errors.As(err, &se) {
		var fields []ProblemField
		for _, f := range se.Fields {
			fields = append(fields, ProblemField{Pointer: pointerOf(se.In, f.Field), Detail: f.Message})
		}
		if len(fields) == 0 && se.Field != "" {
			fields = []ProblemField{{Pointer: pointerOf(se.In, se.Field), Detail: se.Message}}
		}
		return newProblem(status, se.Message, fields...).p
	}
	return newProblem(status, err.Error()).p
}

// writeProblem sends p as application/problem+json.
func writeProblem(c echo.Context, p Problem) error {
	p.RequestID = requestID(c)
	if p.Instance == "" {
		p.Instance = c.Request().URL.Path
	}
	if p.Status == http.StatusServiceUnavailable || p.Status == http.StatusTooManyRequests {
		if c.Response().Header().Get("Retry-After") == "" {
			c.Response().Header().Set("Retry-After", "1")
		}
	}
	b, err := json.Marshal(p)
	if err != nil {
		return err
	}
	return c.Blob(p.Status, "application/problem+json", b)
}

// errorHandler is Echo's HTTPErrorHandler: every error leaves as a problem.
func (s *Server) errorHandler(err error, c echo.Context) {
	if c.Response().Committed {
		return
	}
	if qaui.IsPath(c.Request().URL.Path) {
		if uerr := s.ui.Fail(c, err); uerr != nil {
			s.log.Error("render error page", "request_id", requestID(c), "error", uerr)
		}
		return
	}
	p := problemFor(err)
	if p.Status >= 500 {
		s.log.LogAttrs(c.Request().Context(), slog.LevelError, "request failed",
			slog.String("request_id", requestID(c)), slog.String("error", err.Error()))
	}
	if werr := writeProblem(c, p); werr != nil {
		s.log.Error("write problem", "error", werr)
	}
}
