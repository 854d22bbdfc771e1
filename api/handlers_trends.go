package api

import (
	"bytes"
	"context"
	"fmt"

	"curvekeeper/api/curveplot"
	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

func trendQueryOf(instrument, analyte string, param *oapi.TrendParameter, from, to *oapi.Timestamp, baseline *int) lab.TrendQuery {
	q := lab.TrendQuery{Instrument: instrument, Analyte: analyte}
	if param != nil {
		q.Parameter = string(*param)
	}
	if from != nil {
		q.From = from.Time
	}
	if to != nil {
		q.To = to.Time
	}
	if baseline != nil {
		q.BaselineN = *baseline
	}
	return q
}

// GetTrend returns the drift of one parameter of one instrument and analyte.
func (s *Server) GetTrend(ctx context.Context, req oapi.GetTrendRequestObject) (oapi.GetTrendResponseObject, error) {
	p := req.Params
	t, err := s.reading(ctx).Trend(ctx, trendQueryOf(p.Instrument, p.Analyte, p.Parameter, p.From, p.To, p.Baseline))
	if err != nil {
		return nil, err
	}
	return oapi.GetTrend200JSONResponse(trendOut(t)), nil
}

func trendOut(t *lab.Trend) oapi.Trend {
	out := oapi.Trend{
		Instrument: t.Query.Instrument, Analyte: t.Query.Analyte, Parameter: oapi.TrendParameter(t.Query.Parameter),
		Points: make([]oapi.TrendPoint, 0, len(t.Points)), Violations: make([]oapi.RuleViolation, 0, len(t.Violations)),
		Truncated: t.Truncated, Notes: nonNilS(t.Notes), Cautions: calib.Cautions(),
		Baseline: oapi.TrendBaseline{N: len(t.BaselineIDs), CurveIds: make([]oapi.UUID, 0, len(t.BaselineIDs)), Selection: t.Selection},
	}
	for _, id := range t.BaselineIDs {
		out.Baseline.CurveIds = append(out.Baseline.CurveIds, uuidOf(id))
	}
	if t.HasBaseline {
		out.Baseline.Mean, out.Baseline.Sd = num(t.Baseline.Mean), num(t.Baseline.SD)
		l := t.Baseline.Limits()
		out.Limits = &oapi.ControlLimits{Centre: l.Centre, WarningLow: l.WarningLow, WarningHigh: l.WarningHigh,
			ActionLow: l.ActionLow, ActionHigh: l.ActionHigh}
	}
	for _, p := range t.Points {
		op := oapi.TrendPoint{CurveID: uuidOf(p.Curve.ID), AcquiredAt: oapi.NewTimestamp(p.Curve.AcquiredAt), Status: oapi.CurveStatus(p.Curve.Status),
			Verdict: oapi.Verdict(p.Curve.Verdict), Evaluated: p.Evaluated, InBaseline: p.InBaseline,
			Violations: make([]oapi.ControlRule, 0, len(p.Rules))}
		if p.HasValue {
			op.Value = num(p.Value)
		}
		for _, r := range p.Rules {
			op.Violations = append(op.Violations, oapi.ControlRule(r))
		}
		out.Points = append(out.Points, op)
	}
	for _, v := range t.Violations {
		ov := oapi.RuleViolation{Rule: oapi.ControlRule(v.Rule), Reject: v.Reject, Source: calib.RuleSource(v.Rule),
			CurveIds: make([]oapi.UUID, 0, len(v.CurveIDs))}
		for _, id := range v.CurveIDs {
			ov.CurveIds = append(ov.CurveIds, uuidOf(id))
		}
		out.Violations = append(out.Violations, ov)
	}
	return out
}

// chartSeries is the trend as the control chart draws it: evaluated values only.
func chartSeries(t *lab.Trend) curveplot.Series {
	cs := curveplot.Series{Parameter: t.Query.Parameter}
	if len(t.Points) > 0 {
		cs.Unit = parameterUnit(t.Query.Parameter, t.Points[0].Curve.Unit)
	}
	if t.HasBaseline {
		cs.Mean, cs.SD = t.Baseline.Mean, t.Baseline.SD
	}
	for _, p := range t.Points {
		if !p.Evaluated {
			continue
		}
		cs.Points = append(cs.Points, curveplot.TrendPoint{At: p.Curve.AcquiredAt, Value: p.Value, Label: p.Curve.ID, Violations: p.Rules})
	}
	return cs
}

// parameterUnit is the unit of a trended parameter of curves whose analyte
// is in unit: the slope is response per unit, the intercept and s(y/x) are
// in response units, the LOD in the analyte's unit, R² has none.
func parameterUnit(param, unit string) string {
	switch param {
	case lab.ParamSlope:
		return "response per " + unit
	case lab.ParamIntercept, lab.ParamResidualSD:
		return "response"
	case lab.ParamISResponse:
		return "IS response"
	case lab.ParamLOD:
		return unit
	}
	return ""
}

// trendChart draws the control chart of t as SVG.
func trendChart(t *lab.Trend) ([]byte, error) {
	title := fmt.Sprintf("%s · %s · %s", t.Query.Instrument, t.Query.Analyte, t.Query.Parameter)
	b, err := curveplot.ControlChart(chartSeries(t), curveplot.Options{Format: curveplot.FormatSVG, Title: title, Analyte: t.Query.Analyte})
	if err != nil {
		return nil, fmt.Errorf("api: draw trend: %w", err)
	}
	return b, nil
}

// GetTrendPlotSVG draws the trend's control chart.
func (s *Server) GetTrendPlotSVG(ctx context.Context, req oapi.GetTrendPlotSVGRequestObject) (oapi.GetTrendPlotSVGResponseObject, error) {
	p := req.Params
	t, err := s.reading(ctx).Trend(ctx, trendQueryOf(p.Instrument, p.Analyte, p.Parameter, p.From, p.To, p.Baseline))
	if err != nil {
		return nil, err
	}
	b, err := trendChart(t)
	if err != nil {
		return nil, err
	}
	return oapi.GetTrendPlotSVG200ImageSvgXMLResponse{Body: bytes.NewReader(b), ContentLength: int64(len(b))}, nil
}
