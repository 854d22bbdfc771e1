package store

import (
	"context"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// loadCurveFacts reads the facts of curve id in tx. The caller holds the
// curve's row lock (SELECT … FOR UPDATE), so no review, verification or
// exclusion of the curve can commit between this read and the caller's
// writes.
func loadCurveFacts(ctx context.Context, tx pgx.Tx, id string) (*lab.CurveFacts, error) {
	f := &lab.CurveFacts{ID: id}
	var reviewer, reason, revision *string
	err := tx.QueryRow(ctx, `
SELECT c.status, c.verdict, c.slope IS NOT NULL, c.failed_checks, c.reviewed_by, r.reason,
       (SELECT e.curve_id::text FROM exclusions e WHERE e.revision_of = c.id)
FROM curves c LEFT JOIN reviews r ON r.curve_id = c.id AND r.withdrawn_at IS NULL
WHERE c.id = $1`, id).Scan(&f.Status, &f.Verdict, &f.Fitted, &f.FailedChecks, &reviewer, &reason, &revision)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "curve %s not found", id)
	}
	if err != nil {
		return nil, classify("select facts of curve "+id, err)
	}
	f.ReviewedBy, f.ReviewReason, f.SupersededBy = deref(reviewer), deref(reason), deref(revision)
	// The checks of the curve and of every curve it revises (lab.ReleaseOf:
	// a revision keeps the verification history of the curve it revises).
	rows, err := tx.Query(ctx, `
WITH RECURSIVE lineage (id) AS (
    SELECT $1::uuid
    UNION ALL
    SELECT c.revision_of FROM curves c JOIN lineage l ON c.id = l.id WHERE c.revision_of IS NOT NULL
)
SELECT v.id, v.kind, v.at, v.passed, v.difference_pct, v.limit_pct
FROM verifications v JOIN lineage l ON v.curve_id = l.id ORDER BY v.at, v.id`, id)
	if err != nil {
		return nil, classify("select verifications of curve "+id, err)
	}
	f.Checks, err = pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.VerificationFact, error) {
		var v lab.VerificationFact
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
	// A result withheld for its internal standard or by its sequence stays
	// withheld whatever its curve's review and checks say.
	rows, err := tx.Query(ctx, `SELECT id, acquired_at, release_state, release_reason FROM sample_results
WHERE curve_id = $1 AND NOT (flags && $2::text[]) ORDER BY id`, id, []string{lab.FlagISOutsideWindow, lab.FlagSequenceWithheld})
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
		state, reason := lab.ReleaseOf(f, r.at)
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
