package lab

import (
	"context"
	"fmt"
	"time"

	"curvekeeper/calib"
)

// DefaultBaselineN is the number of approved curves, from the start of the
// window, that make a trend's baseline unless the caller asks otherwise.
// Westgard recommends about 20 control measurements to set limits (from
// memory).
const DefaultBaselineN = 20

// TrendQuery selects a trend.
type TrendQuery struct {
	Instrument, Analyte, Parameter string
	From, To                       time.Time
	BaselineN                      int
}

// TrendPoint is one curve of a trend.
type TrendPoint struct {
	Curve      CurveSummary
	Value      float64
	HasValue   bool
	Evaluated  bool
	InBaseline bool
	Rules      []string
}

// TrendViolation is one rule violation with the curves it involves.
type TrendViolation struct {
	Rule     string
	Reject   bool
	CurveIDs []string
	Points   []int // indices into Trend.Points
}

// Trend is a computed trend: what GET /v1/trends returns, the chart
// draws and the trend page shows.
type Trend struct {
	Query       TrendQuery
	Points      []TrendPoint
	Baseline    calib.Baseline
	HasBaseline bool
	BaselineIDs []string
	Selection   string
	Violations  []TrendViolation
	Truncated   bool
	Notes       []string
}

// Trend reads the series of q and evaluates it: the baseline from the
// first q.BaselineN approved curves with a value, the Westgard rules on
// every curve with a value that was not rejected.
func (s *Service) Trend(ctx context.Context, q TrendQuery) (*Trend, error) {
	if q.Parameter == "" {
		q.Parameter = ParamSlope
	}
	if q.BaselineN == 0 {
		q.BaselineN = DefaultBaselineN
	}
	if err := CheckQueryTimes("from", q.From, "to", q.To); err != nil {
		return nil, err
	}
	curves, truncated, err := s.TrendSeries(ctx, TrendFilter{Instrument: q.Instrument, Analyte: q.Analyte, From: q.From, To: q.To})
	if err != nil {
		return nil, err
	}
	t := &Trend{Query: q, Truncated: truncated,
		Selection: fmt.Sprintf("the first %d approved curves of the window with a %s value", q.BaselineN, q.Parameter)}
	var baseVals, evalVals []float64
	var evalIdx []int
	missing := 0
	for i, c := range curves {
		p := TrendPoint{Curve: c}
		p.Value, p.HasValue = c.ParamValue(q.Parameter)
		if !p.HasValue {
			missing++
		}
		if p.HasValue && c.Status == StatusApproved && len(baseVals) < q.BaselineN {
			p.InBaseline = true
			baseVals = append(baseVals, p.Value)
			t.BaselineIDs = append(t.BaselineIDs, c.ID)
		}
		if p.HasValue && c.Status != StatusRejected {
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
			return nil, fmt.Errorf("lab: trend rules: %w", err)
		}
		rules := calib.PointRules(len(evalVals), vs)
		for k, i := range evalIdx {
			t.Points[i].Rules = rules[k]
		}
		for _, v := range vs {
			tv := TrendViolation{Rule: v.Rule, Reject: v.Reject}
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
		t.Notes = append(t.Notes, fmt.Sprintf("The window holds more than %d curves; only the oldest %d were read. Narrow it with from.", MaxTrendPoints, MaxTrendPoints))
	}
	return t, nil
}
