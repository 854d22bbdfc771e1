package api

import (
	"context"
	"errors"
	"net/http"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// CreateRunSamples stores samples measured after their run and quantifies
// each against the current curve of its analyte, in one transaction.
func (s *Server) CreateRunSamples(ctx context.Context, req oapi.CreateRunSamplesRequestObject) (oapi.CreateRunSamplesResponseObject, error) {
	p := mustPrincipal(ctx)
	samples := make([]lab.Sample, 0, len(req.Body.Samples))
	for _, sm := range req.Body.Samples {
		in := lab.Sample{ID: string(sm.ID), Analyte: string(sm.Analyte), Responses: sm.Responses, Dilution: 1}
		if sm.Dilution != nil {
			in.Dilution = *sm.Dilution
		}
		if sm.AcquiredAt != nil {
			at := sm.AcquiredAt.UTC()
			in.AcquiredAt = &at
		}
		samples = append(samples, in)
	}
	results, err := s.lab.AddSamples(ctx, p, req.ID.String(), samples)
	if err != nil {
		return nil, err
	}
	return oapi.CreateRunSamples201JSONResponse(oapi.RunResults{RunID: req.ID, Results: resultsOut(results), Cautions: calib.Cautions()}), nil
}

// GetRunResults returns every result of a run's samples.
func (s *Server) GetRunResults(ctx context.Context, req oapi.GetRunResultsRequestObject) (oapi.GetRunResultsResponseObject, error) {
	results, rd, err := byID(ctx, s, func(rd *lab.Service) ([]lab.Result, error) { return rd.RunResults(ctx, req.ID.String()) })
	if err != nil {
		return nil, err
	}
	if out, ok, err := s.runResultsAs(ctx, rd, req.ID.String(), results); ok {
		return out, err
	}
	return oapi.GetRunResults200JSONResponse(oapi.RunResults{RunID: req.ID, Results: resultsOut(results), Cautions: calib.Cautions()}), nil
}

// GetSampleResults returns every result for a LIMS sample id.
func (s *Server) GetSampleResults(ctx context.Context, req oapi.GetSampleResultsRequestObject) (oapi.GetSampleResultsResponseObject, error) {
	results, _, err := byID(ctx, s, func(rd *lab.Service) ([]lab.Result, error) { return rd.SampleResults(ctx, req.SampleID) })
	if err != nil {
		var se *lab.Error
		if errors.As(err, &se) && se.Kind == lab.KindNotFound {
			return nil, newProblem(http.StatusNotFound, se.Message, ProblemField{Pointer: "path:sample_id", Detail: se.Message})
		}
		return nil, err
	}
	return oapi.GetSampleResults200JSONResponse(oapi.SampleResults{SampleID: req.SampleID, Results: resultsOut(results), Cautions: calib.Cautions()}), nil
}

// GetResult returns one result as it stands now.
func (s *Server) GetResult(ctx context.Context, req oapi.GetResultRequestObject) (oapi.GetResultResponseObject, error) {
	r, err := s.lab.GetResult(ctx, req.ResultID)
	if err != nil {
		return nil, err
	}
	return oapi.GetResult200JSONResponse{Result: resultsOut([]lab.Result{*r})[0], Cautions: calib.Cautions()}, nil
}

// ListResultEvents serves the change feed of results, one keyset page at a
// time.
func (s *Server) ListResultEvents(ctx context.Context, req oapi.ListResultEventsRequestObject) (oapi.ListResultEventsResponseObject, error) {
	limit := 0
	if req.Params.Limit != nil {
		limit = *req.Params.Limit
	}
	page, err := s.reading(ctx).ResultFeed(ctx, deref(req.Params.Cursor), limit)
	if err != nil {
		return nil, err
	}
	out := oapi.ListResultEvents200JSONResponse{Events: make([]oapi.ResultEvent, 0, len(page.Events)),
		NextCursor: page.NextCursor, HasMore: page.More, Cautions: calib.Cautions()}
	for _, e := range page.Events {
		oe := oapi.ResultEvent{Seq: e.Seq, At: oapi.NewTimestamp(e.At), Kind: oapi.ResultEventKind(e.Kind), Cause: oapi.ResultEventCause(e.Cause),
			ReleaseState: oapi.ReleaseState(e.State), Reason: e.Reason, ResultID: e.ResultID, SampleID: e.SampleID,
			RunID: uuidOf(e.RunID), CurveID: uuidOf(e.CurveID), Analyte: e.Analyte, Unit: e.Unit, Concentration: e.Concentration,
			AcquiredAt: oapi.NewTimestamp(e.AcquiredAt), Dilution: e.Dilution, StandardError: e.StandardError,
			Interval:       oapi.Interval{Low: e.IntervalLow, High: e.IntervalHigh, Level: e.IntervalLevel, Bounded: e.IntervalBounded},
			IntervalMethod: e.IntervalMethod, Flags: enums[oapi.ResultFlag](e.Flags), Reported: jsonPtr[oapi.ReportedValue](e.Reported),
			Uncertainty: jsonPtr[oapi.UncertaintyBudget](e.Uncertainty)}
		if e.Previous != "" {
			prev := oapi.ReleaseState(e.Previous)
			oe.PreviousState = &prev
		}
		out.Events = append(out.Events, oe)
	}
	return out, nil
}

func resultsOut(rs []lab.Result) []oapi.SampleResult {
	out := make([]oapi.SampleResult, 0, len(rs))
	for _, r := range rs {
		out = append(out, oapi.SampleResult{
			ID: r.ID, SampleID: r.SampleID, RunID: uuidOf(r.RunID), CurveID: uuidOf(r.CurveID), Analyte: r.Analyte,
			Unit: r.Unit, AcquiredAt: oapi.NewTimestamp(r.AcquiredAt), Responses: nonNil(r.Responses), Readings: len(r.Responses),
			MeanResponse: r.MeanResponse, Dilution: r.Dilution, Concentration: r.Concentration,
			StandardError: r.StandardError, IntervalMethod: r.IntervalMethod, Flags: enums[oapi.ResultFlag](r.Flags),
			Interval:     oapi.Interval{Low: r.IntervalLow, High: r.IntervalHigh, Level: r.IntervalLevel, Bounded: r.IntervalBounded},
			ReleaseState: oapi.ReleaseState(r.ReleaseState), ReleaseReason: r.ReleaseReason,
			StateChangedAt: oapi.NewTimestamp(r.StateChangedAt), CreatedAt: oapi.NewTimestamp(r.CreatedAt), Actor: r.CreatedBy,
			Reported: jsonPtr[oapi.ReportedValue](r.Reported), InternalStandard: jsonPtr[oapi.ISCheck](r.ISCheck),
			Sequence: jsonPtr[oapi.SequenceRecord](r.Sequence), Uncertainty: jsonPtr[oapi.UncertaintyBudget](r.Uncertainty),
		})
	}
	return out
}
