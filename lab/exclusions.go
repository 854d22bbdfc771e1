package lab

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sort"

	"curvekeeper/calib"
)

// ExcludedPoint names readings of a curve's standards: one replicate
// (1-based, in acquisition order within its level) or, with Replicate 0,
// every reading of the level.
type ExcludedPoint struct {
	Level     string `json:"level"`
	Replicate int    `json:"replicate,omitempty"`
}

// Rules of an exclusion; each breach's message names its rule.
const (
	RuleKnownReading        = "known_reading"
	RuleExcludesNew         = "excludes_something_new"
	RuleMaxExcludedFraction = "max_excluded_fraction"
	RuleMinLevelsKept       = "min_levels_kept"
	RuleBothRangeEnds       = "both_range_ends_need_reason"
)

// MaxExcludedFraction is the largest share of a curve's standard readings
// that may be excluded: ICH M10 (2022) asks that at least 75 % of the
// calibration standards be kept and pass. Each replicate reading counts as
// one standard here (common practice when replicates are injected
// separately); the laboratory's SOP may count otherwise and comes first.
const MaxExcludedFraction = 0.25

// PlanExclusion applies an exclusion request to the readings of a curve
// (points, as its report lists them, earlier exclusions included) and returns
// the points to refit, with Excluded set, and every reading now excluded.
// The rules, checked together so that every breach is reported (KindInvalid
// with Fields):
//
//   - known_reading: each named level exists, each replicate is one of its
//     readings;
//   - excludes_something_new: the request excludes at least one reading not
//     excluded already;
//   - max_excluded_fraction: at most 25 % of all readings excluded, earlier
//     exclusions included (ICH M10: at least 75 % of standards kept);
//   - min_levels_kept: at least minLevels levels keep a reading (the method's
//     min_levels, whose default is ICH M10's six);
//   - both_range_ends_need_reason: excluding every reading of the lowest and
//     of the highest level narrows the validated range at both ends; that
//     needs rangeReason, a separate statement of why the range may shrink
//     (the general reason does not count, so that the decision is made on
//     purpose and recorded as such).
func PlanExclusion(points []calib.PointResult, req []ExcludedPoint, rangeReason string, minLevels int) ([]calib.Point, []ExcludedPoint, error) {
	type level struct {
		conc float64
		idx  []int // indexes into points, in report order = replicate order
	}
	levels := map[string]*level{}
	var order []string
	for i, p := range points {
		l, ok := levels[p.Level]
		if !ok {
			l = &level{conc: p.X}
			levels[p.Level] = l
			order = append(order, p.Level)
		}
		l.idx = append(l.idx, i)
	}
	excluded := make([]bool, len(points))
	before := 0
	for i, p := range points {
		excluded[i] = p.Excluded
		if p.Excluded {
			before++
		}
	}
	var issues []FieldIssue
	add := func(field, rule, format string, args ...any) {
		issues = append(issues, FieldIssue{Field: field, Message: "rule " + rule + ": " + fmt.Sprintf(format, args...)})
	}
	for i, e := range req {
		l, ok := levels[e.Level]
		switch {
		case !ok:
			add(fmt.Sprintf("/points/%d/level", i), RuleKnownReading, "the curve has no level %q", e.Level)
		case e.Replicate < 0 || e.Replicate > len(l.idx):
			add(fmt.Sprintf("/points/%d/replicate", i), RuleKnownReading, "level %s has replicates 1 to %d", e.Level, len(l.idx))
		case e.Replicate == 0:
			for _, k := range l.idx {
				excluded[k] = true
			}
		default:
			excluded[l.idx[e.Replicate-1]] = true
		}
	}
	if len(issues) > 0 {
		return nil, nil, ruleError(issues)
	}
	total, now := len(points), 0
	for _, x := range excluded {
		if x {
			now++
		}
	}
	if now == before {
		add("/points", RuleExcludesNew, "every reading named is excluded already")
	}
	if total == 0 || float64(now) > MaxExcludedFraction*float64(total)+1e-9 {
		add("/points", RuleMaxExcludedFraction, "ICH M10 allows at most %d %% of the standards to be excluded; this would exclude %d of %d readings (%.0f %%)",
			int(math.Round(100*MaxExcludedFraction)), now, total, 100*float64(now)/math.Max(float64(total), 1))
	}
	kept := 0
	allOut := func(l *level) bool {
		for _, k := range l.idx {
			if !excluded[k] {
				return false
			}
		}
		return true
	}
	for _, name := range order {
		if !allOut(levels[name]) {
			kept++
		}
	}
	if kept < minLevels {
		add("/points", RuleMinLevelsKept, "the method needs at least %d levels (ICH M10: six); %d would be left", minLevels, kept)
	}
	if len(order) >= 2 {
		byConc := append([]string(nil), order...)
		sort.SliceStable(byConc, func(i, j int) bool { return levels[byConc[i]].conc < levels[byConc[j]].conc })
		low, high := byConc[0], byConc[len(byConc)-1]
		if allOut(levels[low]) && allOut(levels[high]) && rangeReason == "" {
			add("/range_reason", RuleBothRangeEnds, "excluding both the lowest level (%s) and the highest level (%s) narrows the range at both ends; state why in range_reason", low, high)
		}
	}
	if len(issues) > 0 {
		return nil, nil, ruleError(issues)
	}
	fit := make([]calib.Point, len(points))
	var all []ExcludedPoint
	for _, name := range order {
		for r, k := range levels[name].idx {
			p := points[k]
			fit[k] = calib.Point{Level: p.Level, X: p.X, Y: p.Y, Excluded: excluded[k]}
			if excluded[k] {
				all = append(all, ExcludedPoint{Level: name, Replicate: r + 1})
			}
		}
	}
	return fit, all, nil
}

// ruleError is one KindInvalid error listing every breach.
func ruleError(issues []FieldIssue) error {
	msg := issues[0].Message
	if len(issues) > 1 {
		msg = fmt.Sprintf("%s (and %d more)", msg, len(issues)-1)
	}
	return &Error{Kind: KindInvalid, Field: issues[0].Field, Message: msg, Fields: issues}
}

// Exclude revises curve c without the readings in points on behalf of p:
// the rules of PlanExclusion decide what may be left out, the kept readings
// are fitted again with the curve's method revision, and the revision is
// stored pending review. It returns the revision's id.
func (s *Service) Exclude(ctx context.Context, p Principal, c *Curve, points []ExcludedPoint, reason, rangeReason string) (string, error) {
	if err := CheckFreeText("/reason", reason); err != nil {
		return "", err
	}
	if err := CheckFreeText("/range_reason", rangeReason); err != nil {
		return "", err
	}
	m, err := s.GetMethodRevision(ctx, c.Method, c.MethodRevision)
	if err != nil {
		return "", err
	}
	fitPts, excluded, err := PlanExclusion(c.Report.Points, points, rangeReason, m.Acceptance.MinLevels)
	if err != nil {
		return "", err
	}
	opts := m.OptionsFor(c.Analyte)
	rep, err := calib.Fit(fitPts, opts)
	if err != nil {
		var ie *calib.InputError
		if !errors.As(err, &ie) {
			return "", fmt.Errorf("lab: refit curve %s: %w", c.ID, err)
		}
		rep = calib.FailedReport(fitPts, opts, err)
	}
	bc, err := s.budgetContext(ctx, m, nil, c.RunID, c.Analyte)
	if err == nil {
		err = s.addHistory(ctx, m.Name, c.Analyte, &bc)
	}
	if err != nil {
		return "", err
	}
	return s.store.CreateRevision(ctx, RevisionInput{OriginalID: c.ID, Report: rep, Excluded: excluded,
		Reason: reason, RangeReason: rangeReason, Actor: p.Actor(), Budget: bc})
}
