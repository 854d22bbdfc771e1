package qaui

import (
	"context"
	"encoding/json"
	"math"
	"net/http"
	"net/url"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"curvekeeper/calib"
	"curvekeeper/lab"
)

// curveContext is what a reviewer decides on besides the fit itself: why
// this weighting, each standard against the back-calculation rule, the run's
// operator, the samples quantified on the curve, the verification standards
// and what they did, the exclusion that made this revision or the revision
// that superseded it, and the previous curve of the same instrument and
// analyte side by side.
type curveContext struct {
	Operator     string
	Candidates   []calib.WeightScore
	Standards    []standardRow
	Tolerance    float64 // back-calculation tolerance, % of nominal
	LowTolerance float64 // at the LLOQ
	Samples      []sampleRow
	Checks       []lab.Verification
	Exclusion    *lab.Exclusion    // the exclusion that made this revision; nil for a run's own fit
	SupersededBy *lab.CurveSummary // the revision that replaced this curve; nil while current
	Excludable   []excludableRow   // readings a reviewer may exclude from the page
	Previous     *comparison       // the previous curve of the instrument and analyte; nil when none
	Sequence     *sequenceView     // the run's sequence for this analyte; nil without one
	TopDown      *topDownView      // the method's top-down estimate from the QC history; nil unless its spec takes it from there
}

// topDownView is the top-down estimate of the curve's method and analyte
// from the QC history as a result computed now takes it, or why there is
// none yet.
type topDownView struct {
	Estimate *lab.TopDownEstimate
	Gap      string
}

// sampleRow is a sample's result with its uncertainty budget and
// conformity statement (nil when its method asks for none).
type sampleRow struct {
	lab.Result
	Budget *lab.BudgetRecord
}

// budgetOf reads a result's stored budget; nil when it has none.
func budgetOf(r lab.Result) *lab.BudgetRecord {
	if len(r.Uncertainty) == 0 {
		return nil
	}
	b := new(lab.BudgetRecord)
	if json.Unmarshal(r.Uncertainty, b) != nil {
		return nil
	}
	return b
}

// standardRow is one reading of a standard judged by the back-calculation
// rule (ICH M10: ±15 % of nominal, ±20 % at the LLOQ, by default; the
// method's acceptance settings decide).
type standardRow struct {
	calib.PointResult
	Replicate int    // 1-based within its level
	Judged    bool   // a non-zero standard in the fit with a back-calculated value
	Pass      bool   // |%RE| within the tolerance
	Limit     string // the tolerance that applies, e.g. "±15 %"
	Share     string // the reading's share of the total weight, in %
}

// excludableRow is a reading the exclusion form offers.
type excludableRow struct {
	Value, Label string
}

// comparison is this curve beside the previous one.
type comparison struct {
	Curve lab.CurveSummary
	Rows  []comparisonRow
}

type comparisonRow struct {
	Name, Unit           string
	This, Before, Change string
}

// contextOf gathers the curve's context; a part that cannot be read is left
// out rather than failing the page, except on database errors.
func (s *Pages) contextOf(ctx context.Context, cv *lab.Curve) (*curveContext, error) {
	r := cv.Report
	out := &curveContext{Candidates: r.WeightCandidates}
	rd := s.Reading(ctx) // lag-tolerant reads, as the curve's own
	var seq *lab.RunSequence
	if run, err := rd.GetRun(ctx, cv.RunID); err == nil {
		out.Operator, seq = run.Operator, run.Sequence
	} else if lab.KindOf(err) != lab.KindNotFound {
		return nil, err
	}
	pol := calib.DefaultPolicy()
	if m, err := s.Lab.GetMethodRevision(ctx, cv.Method, cv.MethodRevision); err == nil {
		pol = m.Acceptance
		if a, ok := m.Analyte(cv.Analyte); ok && a.Uncertainty != nil && a.Uncertainty.TopDownSource == lab.TopDownSourceHistory {
			est, gap, err := rd.HistoryTopDown(ctx, cv.Method, cv.Analyte)
			if err != nil {
				return nil, err
			}
			out.TopDown = &topDownView{Estimate: est, Gap: gap}
		}
	} else if lab.KindOf(err) != lab.KindNotFound {
		return nil, err
	}
	out.Tolerance, out.LowTolerance = pol.BackCalcTolerancePct, pol.BackCalcLowTolerancePct
	out.Standards = standardRows(r, pol)
	for _, row := range out.Standards {
		if !row.Excluded {
			v := row.Level + "#" + strconv.Itoa(row.Replicate)
			out.Excludable = append(out.Excludable, excludableRow{Value: v,
				Label: row.Level + " replicate " + strconv.Itoa(row.Replicate) + " (" + g4(row.X) + " " + cv.Unit + ", response " + g4(row.Y) + ")"})
		}
	}

	results, err := rd.RunResults(ctx, cv.RunID)
	if err != nil && lab.KindOf(err) != lab.KindNotFound {
		return nil, err
	}
	var onCurve []lab.Result
	for _, res := range results {
		if res.CurveID == cv.ID {
			onCurve = append(onCurve, res)
			out.Samples = append(out.Samples, sampleRow{Result: res, Budget: budgetOf(res)})
		}
	}
	out.Sequence = sequenceOf(seq, cv.Analyte, onCurve)
	if out.Checks, err = rd.ListVerifications(ctx, cv.ID); err != nil && lab.KindOf(err) != lab.KindNotFound {
		return nil, err
	}
	if cv.RevisionOf != "" {
		if out.Exclusion, err = rd.GetExclusion(ctx, cv.ID); err != nil && lab.KindOf(err) != lab.KindNotFound {
			return nil, err
		}
	}
	// The curves of the same instrument and analyte up to this one's time,
	// newest first: its revision, if any, and the previous curve.
	page, err := rd.ListCurves(ctx, lab.CurveFilter{Instrument: cv.Instrument, Analyte: cv.Analyte,
		To: cv.AcquiredAt.Add(time.Microsecond), Limit: 50})
	if err != nil {
		return nil, err
	}
	var before, beforeApproved *lab.CurveSummary
	for i := range page.Curves {
		c := &page.Curves[i]
		switch {
		case c.RevisionOf == cv.ID:
			out.SupersededBy = c
		case c.AcquiredAt.Before(cv.AcquiredAt) && c.RevisionOf == "" && before == nil:
			before = c
		}
		if c.AcquiredAt.Before(cv.AcquiredAt) && c.Status == lab.StatusApproved && beforeApproved == nil {
			beforeApproved = c
		}
	}
	if beforeApproved != nil {
		before = beforeApproved // what was in force is what the reviewer compares with
	}
	if before != nil {
		out.Previous = compare(cv, *before)
	}
	return out, nil
}

// standardRows judges each reading of the standards by the back-calculation
// rule as calib's check does: non-zero standards in the fit, the wider
// tolerance at the lowest non-zero level.
func standardRows(r *calib.Report, pol calib.Policy) []standardRow {
	rows := make([]standardRow, 0, len(r.Points))
	seen := map[string]int{}
	var total float64
	for _, p := range r.Points {
		total += p.Weight
	}
	for _, p := range r.Points {
		seen[p.Level]++
		row := standardRow{PointResult: p, Replicate: seen[p.Level]}
		if total > 0 && !p.Excluded {
			row.Share = sigFig(100*p.Weight/total, 3)
		}
		if p.X != 0 && !p.Excluded && len(r.Coefficients) > 0 {
			tol := pol.BackCalcTolerancePct
			if p.X == r.Range.Low {
				tol = pol.BackCalcLowTolerancePct
			}
			row.Judged = true
			row.Limit = "±" + strconv.FormatFloat(tol, 'g', -1, 64) + " %"
			row.Pass = p.HasRelativeError && math.Abs(p.RelativeErrorPct) <= tol
		}
		rows = append(rows, row)
	}
	return rows
}

// compare puts the figures a reviewer compares beside the previous curve's.
func compare(cv *lab.Curve, before lab.CurveSummary) *comparison {
	out := &comparison{Curve: before}
	row := func(name, unit string, this, prev *float64) {
		r := comparisonRow{Name: name, Unit: unit, This: "—", Before: "—", Change: "—"}
		figures := 4
		if name == "R²" {
			figures = 6 // 0.99998 and 0.99991 differ; four figures would show 1.000 twice
		}
		if this != nil {
			r.This = sigFig(*this, figures)
		}
		if prev != nil {
			r.Before = sigFig(*prev, figures)
		}
		if this != nil && prev != nil && *prev != 0 {
			r.Change = strconv.FormatFloat(100*(*this-*prev)/math.Abs(*prev), 'f', 1, 64) + " %"
		}
		out.Rows = append(out.Rows, r)
	}
	row("Slope", "response per "+cv.Unit, cv.Slope, before.Slope)
	row("Intercept", "response", cv.Intercept, before.Intercept)
	row("Residual SD s(y/x)", "response", cv.ResidualSD, before.ResidualSD)
	row("R²", "", cv.RSquared, before.RSquared)
	row("LOD", cv.Unit, cv.LOD, before.LOD)
	return out
}

// uiExclude excludes readings of a curve from the page: a revision is fitted
// without them, with the reviewer's reason, as POST
// /v1/curves/{id}/exclusions does.
func (s *Pages) uiExclude(c echo.Context) error {
	id := c.Param("id")
	ctx := c.Request().Context()
	reason := strings.TrimSpace(c.FormValue("reason"))
	form, err := c.FormParams()
	if err != nil {
		return s.Fail(c, err)
	}
	var points []lab.ExcludedPoint
	for _, v := range form["point"] {
		level, rep, ok := strings.Cut(v, "#")
		n, err := strconv.Atoi(rep)
		if !ok || err != nil || n < 1 {
			return s.Error(c, http.StatusBadRequest, "a reading to exclude is named as level#replicate")
		}
		points = append(points, lab.ExcludedPoint{Level: level, Replicate: n})
	}
	problem := ""
	switch {
	case len(points) == 0:
		problem = "Choose the readings to exclude."
	case reason == "":
		problem = "Give the reason for the exclusion; it is recorded with the revision and in the audit trail."
	}
	if problem == "" {
		cv, err := s.Curve(ctx, id)
		if err != nil {
			return s.Fail(c, err)
		}
		rev, err := s.Lab.Exclude(ctx, sessionOf(c).Principal, cv, points, reason, "")
		if err == nil {
			s.Reviewed(id)
			return c.Redirect(http.StatusSeeOther, "/ui/curves/"+url.PathEscape(rev)+"?excluded=1")
		}
		msg, ok := formProblem(err)
		if !ok {
			return s.Fail(c, err)
		}
		problem = msg
	}
	return s.renderCurve(c, id, func(v *curveView) int {
		v.ExcludeProblem, v.ExcludeReason = problem, reason
		return http.StatusUnprocessableEntity
	})
}
