package api

import (
	"bytes"
	"context"
	"fmt"
	"time"

	"curvekeeper/api/curveplot"
	"curvekeeper/api/oapi"
	"curvekeeper/api/record"
	"curvekeeper/lab"
)

// GetCurveRecordPDF prints a curve's whole record.
func (s *Server) GetCurveRecordPDF(ctx context.Context, req oapi.GetCurveRecordPDFRequestObject) (oapi.GetCurveRecordPDFResponseObject, error) {
	in, err := s.recordInput(ctx, req.ID.String())
	if err != nil {
		return nil, err
	}
	b, err := record.PDF(in)
	if err != nil {
		return nil, fmt.Errorf("api: record of curve %s: %w", req.ID, err)
	}
	return oapi.GetCurveRecordPDF200ApplicationPdfResponse{Body: bytes.NewReader(b), ContentLength: int64(len(b))}, nil
}

// recordInput gathers what the printable record shows, read afresh (not
// from the curve cache: the record states the status as it is now).
func (s *Server) recordInput(ctx context.Context, id string) (*record.Input, error) {
	c, err := s.lab.GetCurve(ctx, id)
	if err != nil {
		return nil, err
	}
	now := time.Now
	if s.cfg.Now != nil {
		now = s.cfg.Now
	}
	in := &record.Input{Curve: c, Software: "curvekeeper " + s.cfg.Version, Zone: s.lab.People.Zone, PrintedAt: now()}
	if in.Run, err = s.lab.GetRun(ctx, c.RunID); err != nil {
		return nil, err
	}
	if in.Method, err = s.lab.GetMethodRevision(ctx, c.Method, c.MethodRevision); err != nil {
		return nil, err
	}
	if in.Verifications, err = s.lab.ListVerifications(ctx, id); err != nil {
		return nil, err
	}
	results, err := s.lab.RunResults(ctx, c.RunID)
	if err != nil {
		return nil, err
	}
	for _, r := range results {
		if r.CurveID == c.ID {
			in.Results = append(in.Results, r)
		}
	}
	if in.Signatures, in.SignatureOK, err = s.lab.CurveSignatures(ctx, id); err != nil {
		return nil, err
	}
	if in.Audit, err = s.lab.ListAudit(ctx, id); err != nil {
		return nil, err
	}
	if _, in.ContentHash, err = lab.CanonicalCurve(c); err != nil {
		return nil, err
	}
	if in.PlotPNG, err = s.plot(ctx, id, curveplot.FormatPNG); err != nil {
		return nil, err
	}
	return in, nil
}

// RecalculateCurve refits a curve from its stored readings with the running
// engine and reports identical or the differences.
func (s *Server) RecalculateCurve(ctx context.Context, req oapi.RecalculateCurveRequestObject) (oapi.RecalculateCurveResponseObject, error) {
	rc, err := s.lab.Recalculate(ctx, req.ID.String())
	if err != nil {
		return nil, err
	}
	out := oapi.RecalculateCurve200JSONResponse{CurveID: uuidOf(rc.CurveID), StoredEngine: rc.StoredEngine,
		RunningEngine: rc.RunningEngine, Identical: rc.Identical, Carried: append([]string{}, rc.Carried...)}
	out.Differences = make([]struct {
		Field        string `json:"field"`
		Recalculated string `json:"recalculated"`
		Stored       string `json:"stored"`
	}, len(rc.Differences))
	for i, d := range rc.Differences {
		out.Differences[i].Field, out.Differences[i].Stored, out.Differences[i].Recalculated = d.Field, d.Stored, d.Recalculated
	}
	return out, nil
}
