package api

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"mime"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/export/csvout"
	"curvekeeper/export/fhir"
	"curvekeeper/lab"
)

// Media types a result route may answer in besides application/json.
const (
	mediaFHIR = "application/fhir+json"
	mediaCSV  = "text/csv"
)

type acceptKey struct{}

// acceptMiddleware keeps the Accept header in the request's context for the
// strict handlers, which see only the context.
func acceptMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		if a := c.Request().Header.Get(echo.HeaderAccept); a != "" {
			req := c.Request()
			c.SetRequest(req.WithContext(context.WithValue(req.Context(), acceptKey{}, a)))
		}
		return next(c)
	}
}

// preferred returns the first of offers the Accept header in ctx names
// exactly (media ranges and q-values aside), "" when none: the caller then
// answers in JSON.
func preferred(ctx context.Context, offers ...string) string {
	a, _ := ctx.Value(acceptKey{}).(string)
	for _, part := range strings.Split(a, ",") {
		mt, params, err := mime.ParseMediaType(strings.TrimSpace(part))
		if err != nil || params["q"] == "0" {
			continue
		}
		for _, o := range offers {
			if mt == o {
				return o
			}
		}
	}
	return ""
}

// runResultsAs answers a run's results as FHIR or CSV (see the spec of
// getRunResults); ok false when the caller asked for neither.
func (s *Server) runResultsAs(ctx context.Context, runID string, results []lab.Result) (oapi.GetRunResultsResponseObject, bool, error) {
	media := preferred(ctx, mediaFHIR, mediaCSV)
	if media == "" {
		return nil, false, nil
	}
	run, err := s.lab.GetRun(ctx, runID)
	if err != nil {
		return nil, true, err
	}
	if media == mediaCSV {
		rows := make([]csvout.Result, 0, len(results))
		for _, r := range results {
			row := csvout.Result{SampleID: r.SampleID, Analyte: r.Analyte, Unit: r.Unit, ReleaseState: r.ReleaseState,
				Flags: r.Flags, CurveID: r.CurveID, Instrument: run.Instrument, ObservedAt: r.AcquiredAt}
			if r.Concentration != nil {
				row.Value = strconv.FormatFloat(*r.Concentration, 'g', -1, 64)
			}
			rows = append(rows, row)
		}
		var buf bytes.Buffer
		if err := csvout.Write(&buf, rows); err != nil {
			return nil, true, fmt.Errorf("api: write csv: %w", err)
		}
		return oapi.GetRunResults200TextCsvResponse{Body: &buf, ContentLength: int64(buf.Len())}, true, nil
	}
	obs := make([]fhir.Result, 0, len(results))
	var issued time.Time
	for _, r := range results {
		if r.Concentration == nil {
			continue // no value to state: left out (the JSON and CSV show it)
		}
		if r.CreatedAt.After(issued) {
			issued = r.CreatedAt
		}
		obs = append(obs, fhir.Result{ID: strconv.FormatInt(r.ID, 10), Code: r.Analyte, CodeSystem: fhirAnalyteSystem,
			CodeDisplay: r.Analyte, Value: *r.Concentration, UnitCode: r.Unit, ReleaseState: r.ReleaseState,
			Effective: r.AcquiredAt, Issued: r.CreatedAt, Device: run.Instrument, CurveID: r.CurveID,
			Method: fmt.Sprintf("%s revision %d", run.Method, run.MethodRevision),
			Notes:  append([]string{"Sample " + r.SampleID + "."}, calib.Cautions()...)})
	}
	b, err := fhir.Bundle(obs, issued)
	if err != nil {
		return nil, true, fmt.Errorf("api: fhir bundle: %w", err)
	}
	raw, err := json.Marshal(b)
	if err != nil {
		return nil, true, fmt.Errorf("api: marshal fhir bundle: %w", err)
	}
	var out oapi.GetRunResults200ApplicationFhirPlusJSONResponse
	if err := json.Unmarshal(raw, &out); err != nil {
		return nil, true, fmt.Errorf("api: fhir bundle: %w", err)
	}
	return out, true, nil
}

// fhirAnalyteSystem is the code system of the analyte names in
// Observation.code: the lab's own names, not LOINC.
const fhirAnalyteSystem = "urn:curvekeeper:analyte"
