package api

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"

	"curvekeeper/api/curveplot"
	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// ListCurves returns curve history newest first, one keyset page at a time.
func (s *Server) ListCurves(ctx context.Context, req oapi.ListCurvesRequestObject) (oapi.ListCurvesResponseObject, error) {
	q := req.Params
	f := lab.CurveFilter{
		Instrument: deref(q.Instrument), Analyte: deref(q.Analyte), Method: deref(q.Method), Cursor: deref(q.Cursor),
	}
	if q.Status != nil {
		f.Status = string(*q.Status)
	}
	if q.Verdict != nil {
		f.Verdict = string(*q.Verdict)
	}
	if q.From != nil {
		f.From = q.From.Time
	}
	if q.To != nil {
		f.To = q.To.Time
	}
	if q.Limit != nil {
		f.Limit = *q.Limit
	}
	if err := lab.CheckQueryTimes("from", f.From, "to", f.To); err != nil {
		return nil, err
	}
	page, err := s.reading(ctx).ListCurves(ctx, f) // history tolerates the replicas' lag
	if err != nil {
		return nil, err
	}
	out := oapi.ListCurves200JSONResponse{Curves: make([]oapi.CurveSummary, 0, len(page.Curves)), Cautions: calib.Cautions()}
	for i := range page.Curves {
		out.Curves = append(out.Curves, summaryOut(&page.Curves[i], page.Curves[i].FailedChecks))
	}
	if page.NextCursor != "" {
		out.NextCursor = &page.NextCursor
		out.HasMore = true
	}
	return out, nil
}

// curve returns a stored curve, from the cache when it is there. The cached
// copy's fit is exact (fits are immutable); its review status may be old, so
// callers that report the status use freshCurve.
func (s *Server) curve(ctx context.Context, id string) (*lab.Curve, error) {
	if c, ok := s.curves.get(id); ok {
		return c, nil
	}
	return s.freshCurve(ctx, id)
}

// freshCurve reads a curve from the database and refreshes the cache. In a
// GET it may come from a read replica (byID), with a review status up to
// the lag bound old, as a cached copy's may be.
func (s *Server) freshCurve(ctx context.Context, id string) (*lab.Curve, error) {
	c, _, err := s.curveFrom(ctx, id)
	return c, err
}

// curveFrom is freshCurve that also returns the service that answered, for
// the reads that follow.
func (s *Server) curveFrom(ctx context.Context, id string) (*lab.Curve, *lab.Service, error) {
	c, rd, err := byID(ctx, s, func(rd *lab.Service) (*lab.Curve, error) { return rd.GetCurve(ctx, id) })
	if err != nil {
		return nil, nil, err
	}
	s.curves.put(c)
	return c, rd, nil
}

// GetCurve returns a curve with its fit, checks and limits.
func (s *Server) GetCurve(ctx context.Context, req oapi.GetCurveRequestObject) (oapi.GetCurveResponseObject, error) {
	c, rd, err := s.curveFrom(ctx, req.ID.String())
	if err != nil {
		return nil, err
	}
	out, err := s.curveWithExclusion(ctx, rd, c)
	if err != nil {
		return nil, err
	}
	return oapi.GetCurve200JSONResponse(out), nil
}

// CreatePredictions converts unknowns' responses into concentrations with
// intervals and flags.
func (s *Server) CreatePredictions(ctx context.Context, req oapi.CreatePredictionsRequestObject) (oapi.CreatePredictionsResponseObject, error) {
	out, err := s.predict(ctx, req.ID.String(), req.Body.Confidence, req.Body.Samples, req.Body.MonteCarlo, true)
	if err != nil {
		return nil, err
	}
	return out, nil
}

// predict quantifies samples against curve id; nothing is stored. With
// direct, the answer is encoded as the results are made, and the budgets a
// plan computes are written straight into it rather than into each
// result's Uncertainty member.
func (s *Server) predict(ctx context.Context, id string, confidence *oapi.Confidence, samples []oapi.PredictionSample, mc *oapi.MonteCarloRequest, direct bool) (*predictionJSONResponse, error) {
	c, err := s.curve(ctx, id)
	if err != nil {
		return nil, err
	}
	// The prediction route read the status with its token (authMiddleware).
	status, ok := prefetchedStatus(ctx, id)
	if !ok {
		if status, err = s.lab.CurveStatus(ctx, id); err != nil {
			return nil, err
		}
	}
	r := c.Report
	conf := r.Confidence
	if confidence != nil {
		conf = *confidence
	}
	out := &predictionJSONResponse{PredictionResponse: oapi.PredictionResponse{
		CurveID: uuidOf(id), Analyte: c.Analyte, Unit: c.Unit, Confidence: conf,
		CurveStatus: oapi.CurveStatus(status), CurveVerdict: oapi.Verdict(r.Verdict),
		Cautions: calib.Cautions(), Results: make([]oapi.PredictionResult, 0, len(samples)),
	}}
	bp, err := s.budgetPlan(ctx, c)
	if err == nil && bp.bc.Spec != nil && bp.bc.Spec.TopDownSource == lab.TopDownSourceHistory {
		// The top-down estimate from the QC history changes as verifications
		// are stored: it is added to this request's copy of the plan, never
		// to the cached one.
		var bc lab.BudgetContext
		if bc, err = s.withHistory(ctx, c, bp.bc); err == nil {
			cp := *bp
			cp.bc = bc
			bp = &cp
		}
	}
	if err != nil {
		return nil, err
	}
	var budgetErr error
	direct = direct && bp.fast != nil && mc == nil
	var f *lab.BudgetFigures
	switch {
	case direct:
		out.begin()
		f = budgetFigures.Get().(*lab.BudgetFigures)
		out.pooledFigures = f
	case bp.bc.Spec != nil:
		f = new(lab.BudgetFigures)
	}
	err = lab.Predict(c, conf, len(samples), func(i int) ([]float64, float64) {
		if d := samples[i].Dilution; d != nil {
			return samples[i].Responses, *d
		}
		return samples[i].Responses, 1
	}, func(i int, pr calib.Prediction) {
		res := predictionOut(string(samples[i].ID), pr)
		var planned *lab.BudgetFigures
		switch {
		case bp.bc.Spec == nil || budgetErr != nil:
		case direct && bp.fast.Covers(r, pr):
			var ok bool
			if ok, budgetErr = bp.fast.Compute(r, pr, samples[i].Responses, pr.Dilution, f); ok {
				planned = f
			}
		default:
			// Monte Carlo, asked for or screened, or no plan: the record.
			res.Uncertainty, budgetErr = predictionBudget(c, bp, pr, samples[i].Responses, pr.Dilution, mc, f)
		}
		out.Results = append(out.Results, res)
		if direct {
			out.addResult(bp, planned)
		}
	})
	if direct {
		out.end()
	}
	if err == nil {
		err = budgetErr
	}
	if err != nil {
		out.release()
		return nil, err
	}
	return out, nil
}

func predictionOut(id string, p calib.Prediction) oapi.PredictionResult {
	res := oapi.PredictionResult{
		ID: id, Flags: enums[oapi.PredictionFlag](p.Flags), Readings: p.Readings, MeanResponse: p.MeanResponse,
		Dilution: p.Dilution, IntervalMethod: p.Method,
		Interval: oapi.Interval{Level: p.Interval.Level, Bounded: p.Interval.Bounded},
	}
	if p.HasEstimate() {
		res.Concentration = num(p.Concentration)
		res.StandardError = num(p.StandardError)
	}
	if p.Interval.Bounded {
		res.Interval.Low, res.Interval.High = num(p.Interval.Low), num(p.Interval.High)
	}
	if p.Interval.HighOpen {
		open := true
		res.Interval.Low, res.Interval.HighOpen = num(p.Interval.Low), &open
	}
	return res
}

// ReviewCurve approves or rejects a curve awaiting review, once.
func (s *Server) ReviewCurve(ctx context.Context, req oapi.ReviewCurveRequestObject) (oapi.ReviewCurveResponseObject, error) {
	p := mustPrincipal(ctx)
	id := req.ID.String()
	reason := deref(req.Body.Reason)
	if _, err := s.lab.Review(ctx, p, id, string(req.Body.Decision), reason); err != nil {
		return nil, err
	}
	s.curveChanged(id)
	// Read inside the write's unit, so not cached: the unit may still fail.
	c, err := s.lab.GetCurve(ctx, id)
	if err != nil {
		return nil, err
	}
	return oapi.ReviewCurve200JSONResponse(curveOut(c)), nil
}

// GetCurveAudit returns the audit trail of a curve and of its run.
func (s *Server) GetCurveAudit(ctx context.Context, req oapi.GetCurveAuditRequestObject) (oapi.GetCurveAuditResponseObject, error) {
	events, err := s.curveAudit(ctx, req.ID.String())
	if err != nil {
		return nil, err
	}
	out := oapi.GetCurveAudit200JSONResponse{Events: make([]oapi.AuditEvent, 0, len(events))}
	for _, e := range events {
		out.Events = append(out.Events, oapi.AuditEvent{At: oapi.NewTimestamp(e.At), Actor: e.Actor, Action: e.Action, Detail: auditText(e)})
	}
	return out, nil
}

// curveAudit reads a curve's audit trail, from a read replica in a GET.
func (s *Server) curveAudit(ctx context.Context, id string) ([]lab.AuditEvent, error) {
	events, _, err := byID(ctx, s, func(rd *lab.Service) ([]lab.AuditEvent, error) { return rd.ListAudit(ctx, id) })
	return events, err
}

// auditText renders an audit event's detail for people: the entity and its
// recorded facts as compact JSON.
func auditText(e lab.AuditEvent) string {
	var compact bytes.Buffer
	if len(e.Detail) > 0 && json.Compact(&compact, e.Detail) == nil && compact.String() != "{}" {
		return e.EntityType + " " + e.EntityID + ": " + compact.String()
	}
	return e.EntityType + " " + e.EntityID
}

// GetCurvePlotSVG draws the curve as SVG.
func (s *Server) GetCurvePlotSVG(ctx context.Context, req oapi.GetCurvePlotSVGRequestObject) (oapi.GetCurvePlotSVGResponseObject, error) {
	b, err := s.plot(ctx, req.ID.String(), curveplot.FormatSVG)
	if err != nil {
		return nil, err
	}
	return oapi.GetCurvePlotSVG200ImageSvgXMLResponse{Body: bytes.NewReader(b), ContentLength: int64(len(b))}, nil
}

// GetCurvePlotPNG draws the curve as PNG.
func (s *Server) GetCurvePlotPNG(ctx context.Context, req oapi.GetCurvePlotPNGRequestObject) (oapi.GetCurvePlotPNGResponseObject, error) {
	b, err := s.plot(ctx, req.ID.String(), curveplot.FormatPNG)
	if err != nil {
		return nil, err
	}
	return oapi.GetCurvePlotPNG200ImagePngResponse{Body: bytes.NewReader(b), ContentLength: int64(len(b))}, nil
}

func (s *Server) plot(ctx context.Context, id, format string) ([]byte, error) {
	c, err := s.curve(ctx, id)
	if err != nil {
		return nil, err
	}
	title := fmt.Sprintf("%s · %s · %s", c.Instrument, c.Analyte, c.AcquiredAt.UTC().Format("2006-01-02 15:04 MST"))
	b, err := curveplot.Curve(c.Report, curveplot.Options{Format: format, Title: title, Analyte: c.Analyte, Unit: c.Unit})
	if err != nil {
		return nil, fmt.Errorf("api: plot curve %s: %w", id, err)
	}
	return b, nil
}
