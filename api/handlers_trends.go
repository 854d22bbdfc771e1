package api

import (
	"bytes"
	"context"
	"fmt"
	"strconv"
	"time"

	"curvekeeper/api/curveplot"
	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// DefaultBaselineN is the number of approved curves, from the start of the
// window, that make a trend's baseline unless the caller asks otherwise.
// Westgard recommends about 20 control measurements to set limits (from
// memory).
const DefaultBaselineN = 20

// trendQuery selects a trend.
type trendQuery struct {
	Instrument, Analyte, Parameter string
	From, To                       time.Time
	BaselineN                      int
}

// trendPoint is one curve of a trend.
type trendPoint struct {
	Curve      lab.CurveSummary
	Value      float64
	HasValue   bool
	Evaluated  bool
	InBaseline bool
	Rules      []string
}

// trendViolation is one rule violation with the curves it involves.
type trendViolation struct {
	Rule     string
	Reject   bool
	CurveIDs []string
	Points   []int // indices into trendResult.Points
}

// trendResult is a computed trend: what GET /v1/trends returns, the chart
// draws and the trend page shows.
type trendResult struct {
	Query       trendQuery
	Points      []trendPoint
	Baseline    calib.Baseline
	HasBaseline bool
	BaselineIDs []string
	Selection   string
	Violations  []trendViolation
	Truncated   bool
	Notes       []string
}

// computeTrend reads the series and evaluates it: the baseline from the
// first q.BaselineN approved curves with a value, the Westgard rules on
// every curve with a value that was not rejected.
func (s *Server) computeTrend(ctx context.Context, q trendQuery) (*trendResult, error) {
	if q.Parameter == "" {
		q.Parameter = lab.ParamSlope
	}
	if q.BaselineN == 0 {
		q.BaselineN = DefaultBaselineN
	}
	curves, truncated, err := s.lab.TrendSeries(ctx, lab.TrendFilter{Instrument: q.Instrument, Analyte: q.Analyte, From: q.From, To: q.To})
	if err != nil {
		return nil, err
	}
	t := &trendResult{Query: q, Truncated: truncated,
		Selection: fmt.Sprintf("the first %d approved curves of the window with a %s value", q.BaselineN, q.Parameter)}
	var baseVals, evalVals []float64
	var evalIdx []int
	missing := 0
	for i, c := range curves {
		p := trendPoint{Curve: c}
		p.Value, p.HasValue = c.ParamValue(q.Parameter)
		if !p.HasValue {
			missing++
		}
		if p.HasValue && c.Status == lab.StatusApproved && len(baseVals) < q.BaselineN {
			p.InBaseline = true
			baseVals = append(baseVals, p.Value)
			t.BaselineIDs = append(t.BaselineIDs, c.ID)
		}
		if p.HasValue && c.Status != lab.StatusRejected {
			p.Evaluated = true
			evalVals = append(evalVals, p.Value)
			evalIdx = append(evalIdx, i)
		}
		t.Points = append(t.Points, p)
	}
	if b, err := calib.NewBaseline(baseVals); err == nil {
		t.Baseline, t.HasBaseline = b, true
	} else {
		t.Notes = append(t.Notes, fmt.Sprintf("No baseline: %d approved curve(s) with a %s value in the window, and at least 2 with some spread are needed; no control rule was evaluated.", len(baseVals), q.Parameter))
	}
	if t.HasBaseline {
		if t.Baseline.N < DefaultBaselineN {
			t.Notes = append(t.Notes, fmt.Sprintf("The baseline has only %d curves; limits from fewer than %d are provisional (common practice).", t.Baseline.N, DefaultBaselineN))
		}
		vs, err := calib.Westgard(evalVals, t.Baseline)
		if err != nil {
			return nil, fmt.Errorf("api: trend rules: %w", err)
		}
		rules := calib.PointRules(len(evalVals), vs)
		for k, i := range evalIdx {
			t.Points[i].Rules = rules[k]
		}
		for _, v := range vs {
			tv := trendViolation{Rule: v.Rule, Reject: v.Reject}
			for _, k := range v.Points {
				tv.Points = append(tv.Points, evalIdx[k])
				tv.CurveIDs = append(tv.CurveIDs, t.Points[evalIdx[k]].Curve.ID)
			}
			t.Violations = append(t.Violations, tv)
		}
	}
	if missing > 0 {
		t.Notes = append(t.Notes, fmt.Sprintf("%d curve(s) have no %s value (a failed fit or a model without it) and are listed without one.", missing, q.Parameter))
	}
	if truncated {
		t.Notes = append(t.Notes, fmt.Sprintf("The window holds more than %d curves; only the oldest %d were read. Narrow it with from.", lab.MaxTrendPoints, lab.MaxTrendPoints))
	}
	return t, nil
}

func trendQueryOf(instrument, analyte string, param *oapi.TrendParameter, from, to *time.Time, baseline *int) trendQuery {
	q := trendQuery{Instrument: instrument, Analyte: analyte}
	if param != nil {
		q.Parameter = string(*param)
	}
	if from != nil {
		q.From = *from
	}
	if to != nil {
		q.To = *to
	}
	if baseline != nil {
		q.BaselineN = *baseline
	}
	return q
}

// GetTrend returns the drift of one parameter of one instrument and analyte.
func (s *Server) GetTrend(ctx context.Context, req oapi.GetTrendRequestObject) (oapi.GetTrendResponseObject, error) {
	p := req.Params
	t, err := s.computeTrend(ctx, trendQueryOf(p.Instrument, p.Analyte, p.Parameter, p.From, p.To, p.Baseline))
	if err != nil {
		return nil, err
	}
	return oapi.GetTrend200JSONResponse(trendOut(t)), nil
}

func trendOut(t *trendResult) oapi.Trend {
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
		op := oapi.TrendPoint{CurveID: uuidOf(p.Curve.ID), AcquiredAt: p.Curve.AcquiredAt, Status: oapi.CurveStatus(p.Curve.Status),
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
func chartSeries(t *trendResult) curveplot.Series {
	cs := curveplot.Series{Parameter: t.Query.Parameter}
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

// trendChart draws the control chart of t as SVG.
func trendChart(t *trendResult) ([]byte, error) {
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
	t, err := s.computeTrend(ctx, trendQueryOf(p.Instrument, p.Analyte, p.Parameter, p.From, p.To, p.Baseline))
	if err != nil {
		return nil, err
	}
	b, err := trendChart(t)
	if err != nil {
		return nil, err
	}
	return oapi.GetTrendPlotSVG200ImageSvgXMLResponse{Body: bytes.NewReader(b), ContentLength: int64(len(b))}, nil
}

// trendAltText describes the control chart of t in words.
func trendAltText(t *trendResult) string {
	evaluated := 0
	for _, p := range t.Points {
		if p.Evaluated {
			evaluated++
		}
	}
	txt := fmt.Sprintf("Control chart of the %s of %s on %s: %d curve value(s) in time order.", t.Query.Parameter, t.Query.Analyte, t.Query.Instrument, evaluated)
	if !t.HasBaseline {
		return txt + " No baseline, so no control limits are drawn. " + curveplot.Footer
	}
	l := t.Baseline.Limits()
	txt += fmt.Sprintf(" Centre line %s (mean of %d approved curves), warning limits %s to %s (±2 SD), action limits %s to %s (±3 SD).",
		g4(l.Centre), t.Baseline.N, g4(l.WarningLow), g4(l.WarningHigh), g4(l.ActionLow), g4(l.ActionHigh))
	reject, warn := 0, 0
	for _, v := range t.Violations {
		if v.Reject {
			reject++
		} else {
			warn++
		}
	}
	if reject+warn == 0 {
		txt += " No control rule is violated."
	} else {
		txt += fmt.Sprintf(" %d reject-rule violation(s) and %d warning(s), marked as squares and listed below the chart.", reject, warn)
	}
	return txt + " " + curveplot.Footer
}

func g4(v float64) string { return strconv.FormatFloat(v, 'g', 4, 64) }
