package store

import (
	"context"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// curveFacts is what a result's release state depends on: its curve's
// review and verdict, whether it was superseded by an exclusion revision, and
// the verification standards measured against it.
type curveFacts struct {
	ID           string
	Status       string
	Verdict      string
	Fitted       bool
	FailedChecks []string
	ReviewedBy   string
	ReviewReason string
	SupersededBy string             // the revision's id; "" while the curve is current
	Checks       []verificationFact // ordered by at, then id
}

// verificationFact is one verification as the release state needs it.
type verificationFact struct {
	ID            string
	Kind          string
	At            time.Time
	Passed        bool
	DifferencePct *float64
	LimitPct      float64
}

// releaseOf derives the release state of a result acquired at acquiredAt
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
//     or a new curve (whose results do not depend on this curve's QC);
//  6. the curve awaits review: provisional;
//  7. otherwise the curve is approved (by a reviewer, with a reason when it
//     had failed checks): releasable.
func releaseOf(f *curveFacts, acquiredAt time.Time) (state, reason string) {
	switch {
	case f.SupersededBy != "":
		return lab.ReleaseWithheld, fmt.Sprintf("curve %s was superseded by its revision %s (standards excluded); this sample's current result is the one against the revision", f.ID, f.SupersededBy)
	case !f.Fitted:
		return lab.ReleaseWithheld, fmt.Sprintf("curve %s could not be fitted, so no concentration can be released", f.ID)
	case f.Status == lab.StatusRejected:
		r := fmt.Sprintf("curve %s was rejected in review by %s", f.ID, f.ReviewedBy)
		if f.ReviewReason != "" {
			r += ": " + f.ReviewReason
		}
		return lab.ReleaseWithheld, r
	case f.Verdict == lab.VerdictFail && f.Status != lab.StatusApproved:
		return lab.ReleaseWithheld, fmt.Sprintf("curve %s failed its acceptance checks (%s) and has not been approved", f.ID, strings.Join(f.FailedChecks, ", "))
	}
	var last *verificationFact
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
		return lab.ReleaseWithheld, fmt.Sprintf("the %s calibration verification %s at %s failed (%s, limit ±%s %%); results acquired after it are withheld until a passing verification or a new curve",
			last.Kind, last.ID, last.At.UTC().Format(time.RFC3339), d, strconv.FormatFloat(last.LimitPct, 'g', -1, 64))
	}
	if f.Status == lab.StatusPendingReview {
		return lab.ReleaseProvisional, fmt.Sprintf("curve %s awaits review by a qualified person", f.ID)
	}
	r := fmt.Sprintf("curve %s was approved by %s", f.ID, f.ReviewedBy)
	if f.Verdict == lab.VerdictFail {
		r += " despite failed checks (" + strings.Join(f.FailedChecks, ", ") + "), with the reason: " + f.ReviewReason
	}
	if last != nil {
		r += fmt.Sprintf("; the latest verification before this sample (%s at %s) passed", last.Kind, last.At.UTC().Format(time.RFC3339))
	} else {
		r += "; no verification before this sample failed"
	}
	return lab.ReleaseReleasable, r
}

// loadCurveFacts reads the facts of curve id in tx. The caller holds the
// curve's row lock (SELECT … FOR UPDATE), so no review, verification or
// exclusion of the curve can commit between this read and the caller's
// writes.
func loadCurveFacts(ctx context.Context, tx pgx.Tx, id string) (*curveFacts, error) {
	f := &curveFacts{ID: id}
	var reviewer, reason, revision *string
	err := tx.QueryRow(ctx, `
SELECT c.status, c.verdict, c.slope IS NOT NULL, c.failed_checks, c.reviewed_by, r.reason,
       (SELECT e.curve_id::text FROM exclusions e WHERE e.revision_of = c.id)
FROM curves c LEFT JOIN reviews r ON r.curve_id = c.id
WHERE c.id = $1`, id).Scan(&f.Status, &f.Verdict, &f.Fitted, &f.FailedChecks, &reviewer, &reason, &revision)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "curve %s not found", id)
	}
	if err != nil {
		return nil, classify("select facts of curve "+id, err)
	}
	f.ReviewedBy, f.ReviewReason, f.SupersededBy = deref(reviewer), deref(reason), deref(revision)
	rows, err := tx.Query(ctx, `
SELECT id, kind, at, passed, difference_pct, limit_pct FROM verifications WHERE curve_id = $1 ORDER BY at, id`, id)
	if err != nil {
		return nil, classify("select verifications of curve "+id, err)
	}
	f.Checks, err = pgx.CollectRows(rows, func(row pgx.CollectableRow) (verificationFact, error) {
		var v verificationFact
		err := row.Scan(&v.ID, &v.Kind, &v.At, &v.Passed, &v.DifferencePct, &v.LimitPct)
		return v, err
	})
	if err != nil {
		return nil, classify("scan verifications of curve "+id, err)
	}
	return f, nil
}

func deref(s *string) string {
	if s == nil {
		return ""
	}
	return *s
}

// refreshCurveResults recomputes the release state of every result against
// curve id (whose row lock the caller holds), writes the ones that changed
// and adds one state_changed event per changed state to events. A change of
// reason alone is written but is not an event: the feed carries transitions.
func refreshCurveResults(ctx context.Context, tx pgx.Tx, id, cause string, events *eventBuffer) (changed int, err error) {
	f, err := loadCurveFacts(ctx, tx, id)
	if err != nil {
		return 0, err
	}
	rows, err := tx.Query(ctx, `SELECT id, acquired_at, release_state, release_reason FROM sample_results WHERE curve_id = $1 ORDER BY id`, id)
	if err != nil {
		return 0, classify("select results of curve "+id, err)
	}
	type current struct {
		id            int64
		at            time.Time
		state, reason string
	}
	results, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (current, error) {
		var c current
		err := row.Scan(&c.id, &c.at, &c.state, &c.reason)
		return c, err
	})
	if err != nil {
		return 0, classify("scan results of curve "+id, err)
	}
	var (
		ids             []int64
		states, reasons []string
	)
	for _, r := range results {
		state, reason := releaseOf(f, r.at)
		if state == r.state && reason == r.reason {
			continue
		}
		ids, states, reasons = append(ids, r.id), append(states, state), append(reasons, reason)
		if state != r.state {
			changed++
			events.add(resultEvent{ResultID: r.id, Kind: lab.EventStateChanged, Cause: cause, State: state, Previous: r.state, Reason: reason})
		}
	}
	if len(ids) == 0 {
		return 0, nil
	}
	_, err = tx.Exec(ctx, `
UPDATE sample_results s SET release_state = u.state, release_reason = u.reason, state_changed_at = now()
FROM unnest($1::bigint[], $2::text[], $3::text[]) AS u(id, state, reason)
WHERE s.id = u.id`, ids, states, reasons)
	if err != nil {
		return 0, classify("update release states of curve "+id, err)
	}
	return changed, nil
}
