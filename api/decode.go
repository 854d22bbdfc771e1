package api

import (
	"strings"

	"github.com/labstack/echo/v4"

	"curvekeeper/api/oapi"
)

// The two hot routes, POST /v1/runs and POST /v1/curves/{id}/predictions,
// decode their bodies in one visible step instead of the generic
// validator middleware: the fast path first (validate_runs.go,
// validate_predictions.go), which only ever accepts and hands back the body
// it decoded; whatever it does not certainly accept goes to the spec's
// validator, which answers as for every other route, and is then decoded
// as the generated handler decodes it. Only then are the parameters parsed
// (by the generated wrapper, as before the validator had run) and the
// handler called with the typed request.
var decodedRoutes = map[string]bool{runsRoute: true, predictionRoute: true}

// registerDecodedRoutes replaces the generated routes of decodedRoutes.
func (s *Server) registerDecodedRoutes(e *echo.Echo) {
	e.POST(runsRoute, s.postRun)
	e.POST(predictionRoute, s.postPredictions)
}

// decodeBody is the decode step: the body the fast path decoded, or nil
// once the spec's validator has accepted a request the fast path did not
// (the caller then decodes the body plainly).
func decodeBody[T any](s *Server, c echo.Context, fast func(echo.Context) (*T, bool, error)) (*T, error) {
	body, ok, err := fast(c)
	if err != nil || ok {
		return body, err
	}
	return nil, s.spec.validate(c)
}

// postRun is POST /v1/runs: decode, then CreateRun.
func (s *Server) postRun(c echo.Context) error {
	run, err := decodeBody(s, c, runFastPath)
	if err != nil {
		return err
	}
	return (&oapi.ServerInterfaceWrapper{Handler: decodedRun{s: s, run: run}}).CreateRun(c)
}

// decodedRun receives CreateRun's parameters from the generated wrapper,
// with the body the decode step produced (nil: decode it here).
type decodedRun struct {
	oapi.ServerInterface
	s   *Server
	run *oapi.RunRequest
}

func (d decodedRun) CreateRun(c echo.Context, params oapi.CreateRunParams) error {
	req := oapi.CreateRunRequestObject{Params: params, JSONBody: d.run}
	ct := c.Request().Header.Get(echo.HeaderContentType)
	if d.run == nil && strings.HasPrefix(ct, echo.MIMEApplicationJSON) {
		var body oapi.CreateRunJSONRequestBody
		if err := (&echo.DefaultBinder{}).BindBody(c, &body); err != nil {
			return err
		}
		req.JSONBody = &body
	}
	if strings.HasPrefix(ct, "text/csv") {
		req.Body = c.Request().Body
	}
	resp, err := d.s.CreateRun(c.Request().Context(), req)
	if err != nil {
		return err
	}
	return resp.VisitCreateRunResponse(c.Response())
}

// postPredictions is POST /v1/curves/{id}/predictions: decode, then
// CreatePredictions.
func (s *Server) postPredictions(c echo.Context) error {
	body, err := decodeBody(s, c, predictionFastPath)
	if err != nil {
		return err
	}
	return (&oapi.ServerInterfaceWrapper{Handler: decodedPredictions{s: s, body: body}}).CreatePredictions(c)
}

// decodedPredictions is decodedRun for CreatePredictions.
type decodedPredictions struct {
	oapi.ServerInterface
	s    *Server
	body *oapi.PredictionRequest
}

func (d decodedPredictions) CreatePredictions(c echo.Context, id oapi.CurveID) error {
	req := oapi.CreatePredictionsRequestObject{ID: id, Body: d.body}
	if req.Body == nil {
		var body oapi.CreatePredictionsJSONRequestBody
		if err := (&echo.DefaultBinder{}).BindBody(c, &body); err != nil {
			return err
		}
		req.Body = &body
	}
	resp, err := d.s.CreatePredictions(c.Request().Context(), req)
	if err != nil {
		return err
	}
	return resp.VisitCreatePredictionsResponse(c.Response())
}
