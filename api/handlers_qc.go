package api

import (
	"context"
	"errors"
	"fmt"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// CreateVerification records a verification standard (ICV/CCV) against a
// curve and moves the release state of the curve's results accordingly.
func (s *Server) CreateVerification(ctx context.Context, req oapi.CreateVerificationRequestObject) (oapi.CreateVerificationResponseObject, error) {
	p := mustPrincipal(ctx)
	b := req.Body
	v, err := s.lab.Verify(ctx, p, lab.VerificationInput{
		CurveID: req.ID.String(), Kind: string(b.Kind), Level: string(b.Level), Concentration: b.Concentration,
		Responses: b.Responses, At: b.AcquiredAt.Time, Material: deref(b.Material),
	})
	if err != nil {
		return nil, err
	}
	s.history.reset() // the top-down history of the curve's method and analyte grew
	return oapi.CreateVerification201JSONResponse{Verification: verificationOut(v), ResultsChanged: v.ResultsChanged,
		Cautions: calib.Cautions()}, nil
}

// ListVerifications lists the verification standards of a curve.
func (s *Server) ListVerifications(ctx context.Context, req oapi.ListVerificationsRequestObject) (oapi.ListVerificationsResponseObject, error) {
	vs, err := s.lab.ListVerifications(ctx, req.ID.String())
	if err != nil {
		return nil, err
	}
	out := oapi.ListVerifications200JSONResponse{Verifications: make([]oapi.Verification, 0, len(vs)), Cautions: calib.Cautions()}
	for i := range vs {
		out.Verifications = append(out.Verifications, verificationOut(&vs[i]))
	}
	return out, nil
}

func verificationOut(v *lab.Verification) oapi.Verification {
	return oapi.Verification{ID: uuidOf(v.ID), CurveID: uuidOf(v.CurveID), Kind: oapi.VerificationKind(v.Kind),
		Level: v.Level, Concentration: v.Concentration, Responses: nonNil(v.Responses), Found: v.Found,
		RecoveryPct: v.RecoveryPct, DifferencePct: v.DifferencePct, LimitPct: v.LimitPct, Passed: v.Passed,
		Detail: v.Detail, Source: calib.VerificationSource, AcquiredAt: oapi.NewTimestamp(v.At), CreatedAt: oapi.NewTimestamp(v.CreatedAt), Actor: v.CreatedBy,
		Material: optString(v.Material)}
}

// CreateExclusion refits a curve without some of its readings as a new
// revision, under the exclusion rules (lab.PlanExclusion). The plan and
// the fit are computed before the transaction opens; the original's readings
// are immutable, so they stay valid.
func (s *Server) CreateExclusion(ctx context.Context, req oapi.CreateExclusionRequestObject) (oapi.CreateExclusionResponseObject, error) {
	p := mustPrincipal(ctx)
	c, err := s.curve(ctx, req.ID.String())
	if err != nil {
		return nil, err
	}
	pts := make([]lab.ExcludedPoint, 0, len(req.Body.Points))
	for _, x := range req.Body.Points {
		e := lab.ExcludedPoint{Level: string(x.Level)}
		if x.Replicate != nil {
			e.Replicate = *x.Replicate
		}
		pts = append(pts, e)
	}
	rangeReason := ""
	if req.Body.RangeReason != nil {
		rangeReason = string(*req.Body.RangeReason)
	}
	revID, err := s.lab.Exclude(ctx, p, c, pts, string(req.Body.Reason), rangeReason)
	if err != nil {
		return nil, err
	}
	s.curveChanged(c.ID) // superseded: its verifications leave the top-down history
	// Read inside the write's unit, so not cached: the unit may still fail.
	rc, err := s.lab.GetCurve(ctx, revID)
	if err != nil {
		return nil, err
	}
	out, err := s.curveWithExclusion(ctx, s.lab, rc)
	if err != nil {
		return nil, err
	}
	return oapi.CreateExclusion201JSONResponse{Body: out, Headers: oapi.CreateExclusion201ResponseHeaders{Location: "/v1/curves/" + revID}}, nil
}

// curveWithExclusion renders a curve and, for a revision, why it was made
// (read from rd, where the curve was read).
func (s *Server) curveWithExclusion(ctx context.Context, rd *lab.Service, c *lab.Curve) (oapi.Curve, error) {
	out := curveOut(c)
	if c.RevisionOf == "" {
		return out, nil
	}
	e, err := rd.GetExclusion(ctx, c.ID)
	if err != nil {
		return oapi.Curve{}, err
	}
	ex := &oapi.Exclusion{RevisionOf: uuidOf(e.RevisionOf), Reason: e.Reason, Actor: e.Actor, At: oapi.NewTimestamp(e.At)}
	if e.RangeReason != "" {
		rr := e.RangeReason
		ex.RangeReason = &rr
	}
	for _, p := range e.Points {
		ex.Points = append(ex.Points, struct {
			Level     string `json:"level"`
			Replicate int    `json:"replicate"`
		}{p.Level, p.Replicate})
	}
	out.Exclusion = ex
	return out, nil
}

// GetCurveInForce returns the curve that applied to an instrument and
// analyte at a moment.
func (s *Server) GetCurveInForce(ctx context.Context, req oapi.GetCurveInForceRequestObject) (oapi.GetCurveInForceResponseObject, error) {
	at := s.lab.Now().UTC()
	if req.Params.At != nil {
		if err := lab.CheckTimestamp(lab.InQuery, "/at", req.Params.At.Time); err != nil {
			return nil, err
		}
		at = req.Params.At.UTC()
	}
	in, err := s.lab.CurveInForce(ctx, req.Instrument, req.Params.Analyte, at)
	if err != nil {
		return nil, err
	}
	out := oapi.GetCurveInForce200JSONResponse{Curve: summaryOut(&in.Curve, in.Curve.FailedChecks), Basis: in.Basis,
		At: oapi.NewTimestamp(at), ExpiresAt: oapi.TimestampPtr(in.ExpiresAt), Cautions: calib.Cautions()}
	if in.LastVerification != nil {
		v := verificationOut(in.LastVerification)
		out.LastVerification = &v
	}
	return out, nil
}

// CreateInstrumentPredictions quantifies samples against the curve in force,
// so that a LIMS need not track curve ids.
// CreateInstrumentPredictionBatch quantifies several analytes of an
// instrument against their curves in force, whole or not at all.
func (s *Server) CreateInstrumentPredictionBatch(ctx context.Context, req oapi.CreateInstrumentPredictionBatchRequestObject) (oapi.CreateInstrumentPredictionBatchResponseObject, error) {
	at := s.lab.Now().UTC()
	if req.Body.At != nil {
		if err := lab.CheckTimestamp(lab.InBody, "/at", req.Body.At.Time); err != nil {
			return nil, err
		}
		at = req.Body.At.UTC()
	}
	samples := 0
	for _, a := range req.Body.Analytes {
		samples += len(a.Samples)
	}
	if samples > lab.MaxPredictionSamples {
		return nil, lab.FieldError("/analytes", "%d samples in all; at most %d may be quantified in one request", samples, lab.MaxPredictionSamples)
	}
	out := oapi.PredictionBatchResponse{Predictions: make([]oapi.PredictionResponse, 0, len(req.Body.Analytes)), Cautions: calib.Cautions()}
	for i, a := range req.Body.Analytes {
		in, err := s.lab.CurveInForce(ctx, req.Instrument, string(a.Analyte), at)
		if err != nil {
			var le *lab.Error
			if errors.As(err, &le) && le.Kind == lab.KindNotFound {
				return nil, &lab.Error{Kind: lab.KindNotFound, In: lab.InBody, Field: fmt.Sprintf("/analytes/%d/analyte", i), Message: le.Message}
			}
			return nil, err
		}
		p, err := s.predict(ctx, in.Curve.ID, req.Body.Confidence, a.Samples, nil, false)
		if err != nil {
			return nil, err
		}
		out.Predictions = append(out.Predictions, p.PredictionResponse)
	}
	return oapi.CreateInstrumentPredictionBatch200JSONResponse(out), nil
}

func (s *Server) CreateInstrumentPredictions(ctx context.Context, req oapi.CreateInstrumentPredictionsRequestObject) (oapi.CreateInstrumentPredictionsResponseObject, error) {
	at := s.lab.Now().UTC()
	if req.Body.At != nil {
		if err := lab.CheckTimestamp(lab.InBody, "/at", req.Body.At.Time); err != nil {
			return nil, err
		}
		at = req.Body.At.UTC()
	}
	in, err := s.lab.CurveInForce(ctx, req.Instrument, string(req.Body.Analyte), at)
	if err != nil {
		return nil, err
	}
	out, err := s.predict(ctx, in.Curve.ID, req.Body.Confidence, req.Body.Samples, nil, true)
	if err != nil {
		return nil, err
	}
	return out, nil
}
