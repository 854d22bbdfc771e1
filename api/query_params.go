package api

import (
	"net/http"
	"net/url"
	"sort"
	"strings"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/labstack/echo/v4"
)

// queryParams holds, for each route (method and Echo path), the query
// parameters the spec declares for it. A request naming any other is refused
// with 400: an unknown name is almost always a typo (`instrumnt=`) or a
// parameter of another list (`since=` on a cursor list), and ignoring it would
// answer a different question than the one asked.
type queryParams map[string]map[string]bool

func newQueryParams(doc *openapi3.T) queryParams {
	qp := queryParams{}
	for path, item := range doc.Paths.Map() {
		echoPath := specPathToEcho(path)
		for method, op := range item.Operations() {
			names := map[string]bool{}
			for _, params := range []openapi3.Parameters{item.Parameters, op.Parameters} {
				for _, p := range params {
					if p.Value != nil && p.Value.In == openapi3.ParameterInQuery {
						names[p.Value.Name] = true
					}
				}
			}
			qp[method+" "+echoPath] = names
		}
	}
	return qp
}

// specPathToEcho turns /v1/curves/{id} into /v1/curves/:id.
func specPathToEcho(p string) string {
	segs := strings.Split(p, "/")
	for i, seg := range segs {
		if strings.HasPrefix(seg, "{") && strings.HasSuffix(seg, "}") {
			segs[i] = ":" + seg[1:len(seg)-1]
		}
	}
	return strings.Join(segs, "/")
}

// check returns the 400 problem for query parameters the route does not
// declare, naming each, or nil. Routes the spec does not describe are not its
// to judge.
func (qp queryParams) check(c echo.Context) error {
	req := c.Request()
	if req.URL.RawQuery == "" {
		return nil
	}
	known, ok := qp[req.Method+" "+c.Path()]
	if !ok {
		return nil
	}
	values, err := url.ParseQuery(req.URL.RawQuery)
	if err != nil {
		return nil // the spec's validator answers malformed queries
	}
	var unknown []string
	for name := range values {
		if !known[name] {
			unknown = append(unknown, name)
		}
	}
	if len(unknown) == 0 {
		return nil
	}
	sort.Strings(unknown)
	allowed := make([]string, 0, len(known))
	for name := range known {
		allowed = append(allowed, name)
	}
	sort.Strings(allowed)
	hint := "this route takes no query parameters"
	if len(allowed) > 0 {
		hint = "this route takes " + strings.Join(allowed, ", ")
	}
	fields := make([]ProblemField, len(unknown))
	for i, name := range unknown {
		fields[i] = ProblemField{Pointer: "query:" + name, Detail: "unknown query parameter " + name + "; " + hint}
	}
	detail := fields[0].Detail
	if len(fields) > 1 {
		detail = "unknown query parameters " + strings.Join(unknown, ", ") + "; " + hint
	}
	return newProblem(http.StatusBadRequest, detail, fields...)
}
