package lab

import (
	"fmt"
	"strconv"
	"strings"
	"time"

	"curvekeeper/calib"
)

// CurveFacts is what a result's release state depends on: its curve's
// review and verdict, whether it was superseded by an exclusion revision, and
// the verification standards measured against it.
type CurveFacts struct {
	ID           string
	Status       string
	Verdict      string
	Fitted       bool
	FailedChecks []string
	ReviewedBy   string
	ReviewReason string
	SupersededBy string // the revision's id; "" while the curve is current
	// Checks are the verifications of the curve and of every curve it
	// revises, ordered by at, then id: a revision keeps the verification
	// history of the curve it revises, because an exclusion corrects a
	// standard, not the instrument's drift.
	Checks []VerificationFact
}

// VerificationFact is one verification as the release state needs it.
type VerificationFact struct {
	ID            string
	Kind          string
	At            time.Time
	Passed        bool
	DifferencePct *float64
	LimitPct      float64
}

// ReleaseOf derives the release state of a result acquired at acquiredAt
// from its curve's facts, and says why in words. The first rule that applies
// decides:
//
//  1. the curve was superseded by an exclusion revision: withheld (the
//     sample has a result against the revision);
//  2. the curve could not be fitted: withheld;
//  3. the curve was rejected in review: withheld;
//  4. the curve failed its mandatory checks and was not approved: withheld;
//  5. the latest verification at or before acquiredAt failed: withheld until
//     a passing verification (results acquired after that one are not held)
//     or a new curve from a new run (whose results do not depend on this
//     curve's QC); a revision made by excluding standards is not a new
//     curve in this sense: it keeps the checks of the curve it revises;
//  6. the curve awaits review: provisional;
//  7. otherwise the curve is approved (by a reviewer, with a reason when it
//     had failed checks): releasable.
func ReleaseOf(f *CurveFacts, acquiredAt time.Time) (state, reason string) {
	switch {
	case f.SupersededBy != "":
		return ReleaseWithheld, fmt.Sprintf("curve %s was superseded by its revision %s (standards excluded); this sample's current result is the one against the revision", f.ID, f.SupersededBy)
	case !f.Fitted:
		return ReleaseWithheld, fmt.Sprintf("curve %s could not be fitted, so no concentration can be released", f.ID)
	case f.Status == StatusRejected:
		r := fmt.Sprintf("curve %s was rejected in review by %s", f.ID, f.ReviewedBy)
		if f.ReviewReason != "" {
			r += ": " + f.ReviewReason
		}
		return ReleaseWithheld, r
	case f.Verdict == VerdictFail && f.Status != StatusApproved:
		return ReleaseWithheld, fmt.Sprintf("curve %s failed its acceptance checks (%s) and has not been approved", f.ID, strings.Join(f.FailedChecks, ", "))
	}
	var last *VerificationFact
	for i := range f.Checks {
		if f.Checks[i].At.After(acquiredAt) {
			break
		}
		last = &f.Checks[i]
	}
	if last != nil && !last.Passed {
		d := "no value read back"
		if last.DifferencePct != nil {
			d = "%D " + strconv.FormatFloat(*last.DifferencePct, 'f', 1, 64) + " %"
		}
		return ReleaseWithheld, fmt.Sprintf("the %s calibration verification %s at %s failed (%s, limit ±%s %%); results acquired after it are withheld until a passing verification or a new curve",
			last.Kind, last.ID, last.At.UTC().Format(time.RFC3339), d, strconv.FormatFloat(last.LimitPct, 'g', -1, 64))
	}
	if f.Status == StatusPendingReview {
		return ReleaseProvisional, fmt.Sprintf("curve %s awaits review by a qualified person", f.ID)
	}
	r := fmt.Sprintf("curve %s was approved by %s", f.ID, f.ReviewedBy)
	if f.Verdict == VerdictFail {
		r += " despite failed checks (" + strings.Join(f.FailedChecks, ", ") + "), with the reason: " + f.ReviewReason
	}
	if last != nil {
		r += fmt.Sprintf("; the latest verification before this sample (%s at %s) passed", last.Kind, last.At.UTC().Format(time.RFC3339))
	} else {
		r += "; no verification before this sample failed"
	}
	return ReleaseReleasable, r
}

// Quantity is the outcome of quantifying one sample.
type Quantity struct {
	Conc, SE, Low, High *float64 // nil when not computed or not finite
	Level               float64  // two-sided confidence of the interval
	Bounded             bool
	Method              string // how the interval was made, or why there is none
	Flags               []string
	Mean                float64 // mean response
}

// Quantify predicts the concentration of a sample from rep with the
// dilution applied after inversion (calib.Report.Predict). A curve without a
// fit, or readings the engine refuses, still give a result: without a
// concentration, flagged, the interval method saying why.
func Quantify(rep *calib.Report, responses []float64, dilution float64) Quantity {
	q := Quantity{Level: rep.Confidence, Flags: []string{}}
	if !(q.Level > 0 && q.Level < 1) {
		q.Level = 0.95
	}
	for _, y := range responses {
		q.Mean += y / float64(len(responses))
	}
	if len(rep.Coefficients) == 0 {
		q.Flags, q.Method = []string{FlagNoCurve}, "none: the curve could not be fitted"
		return q
	}
	p, err := rep.Predict(responses, dilution, 0)
	if err != nil {
		q.Flags, q.Method = []string{FlagNotQuantifiable}, "none: "+err.Error()
		return q
	}
	q.Mean, q.Method, q.Flags, q.Level = p.MeanResponse, p.Method, append(q.Flags, p.Flags...), p.Interval.Level
	if p.HasEstimate() {
		q.Conc, q.SE = finitePtr(p.Concentration), finitePtr(p.StandardError)
	}
	if p.Interval.Bounded {
		q.Low, q.High = finitePtr(p.Interval.Low), finitePtr(p.Interval.High)
		q.Bounded = q.Low != nil && q.High != nil
		if !q.Bounded {
			q.Low, q.High = nil, nil
		}
	}
	if !calib.Finite(q.Mean) {
		q.Mean = 0
	}
	return q
}

// finitePtr returns &v, or nil when v is not finite.
func finitePtr(v float64) *float64 {
	if !calib.Finite(v) {
		return nil
	}
	return &v
}
