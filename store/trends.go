package store

import (
	"context"
	"encoding/json"
	"fmt"
	"slices"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// TrendSeries returns the curves of f oldest first (acquired_at, then id),
// every status included, at most MaxTrendPoints of them; truncated says that
// the window held more (the oldest are returned, since the baseline is taken
// from the start of the series). It reads the history index backwards.
func (db *DB) TrendSeries(ctx context.Context, f lab.TrendFilter) (curves []lab.CurveSummary, truncated bool, err error) {
	if f.Instrument == "" || f.Analyte == "" {
		return nil, false, lab.FieldError("/instrument", "a trend needs an instrument and an analyte")
	}
	args := []any{f.Instrument, f.Analyte}
	// The coefficients of a converged non-linear curve, for the trends of
	// its parameters by name (NULL for the other curves).
	sql := `SELECT ` + curveColumns + `,
CASE WHEN report->'Curve'->>'Outcome' = 'converged' THEN report->'Coefficients' END
FROM curves WHERE instrument = $1 AND analyte = $2`
	if !f.From.IsZero() {
		args = append(args, f.From)
		sql += fmt.Sprintf(` AND acquired_at >= $%d`, len(args))
	}
	if !f.To.IsZero() {
		args = append(args, f.To)
		sql += fmt.Sprintf(` AND acquired_at < $%d`, len(args))
	}
	args = append(args, lab.MaxTrendPoints+1)
	sql += fmt.Sprintf(` ORDER BY acquired_at, id LIMIT $%d`, len(args))
	rows, err := db.q(ctx).Query(ctx, sql, args...)
	if err != nil {
		return nil, false, classify("trend series", err)
	}
	curves, err = pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.CurveSummary, error) {
		var coef []byte
		c, err := scanCurveSummary(row, &coef)
		if err == nil && coef != nil {
			err = json.Unmarshal(coef, &c.Coefficients)
		}
		return c, err
	})
	if err != nil {
		return nil, false, classify("scan trend series", err)
	}
	if len(curves) > lab.MaxTrendPoints {
		return curves[:lab.MaxTrendPoints], true, nil
	}
	return curves, false, nil
}

// sqlRecentApprovedSlopes reads the drift history of RecentApprovedSlopes.
const sqlRecentApprovedSlopes = `
SELECT slope FROM curves
WHERE instrument = $1 AND analyte = $2 AND status = 'approved' AND acquired_at < $3 AND slope IS NOT NULL
ORDER BY acquired_at DESC, id DESC
LIMIT $4`

// RecentApprovedSlopes returns the slopes of the at most limit newest
// approved curves of instrument and analyte acquired before before, oldest
// first: the history a new curve's drift check is judged against. It is one
// scan of the partial index curves_approved_history.
func (db *DB) RecentApprovedSlopes(ctx context.Context, instrument, analyte string, before time.Time, limit int) ([]float64, error) {
	if limit < 1 || limit > lab.MaxTrendPoints {
		return nil, lab.Errorf(lab.KindInvalid, "limit must be in [1, %d]", lab.MaxTrendPoints)
	}
	rows, err := db.q(ctx).Query(ctx, sqlRecentApprovedSlopes, instrument, analyte, before, limit)
	if err != nil {
		return nil, classify("recent approved slopes", err)
	}
	vals, err := pgx.CollectRows(rows, pgx.RowTo[float64])
	if err != nil {
		return nil, classify("scan recent approved slopes", err)
	}
	slices.Reverse(vals)
	return vals, nil
}

// sqlTrendSubjects lists the instrument and analyte pairs of curves_history
// by skipping from one pair to the next in the index (one descent per pair,
// a recursive CTE, since PostgreSQL 15 has no skip scan), and counts each
// pair's newest curves up to $1 + 1. Its cost grows with the number of
// pairs, not of curves: GROUP BY over curves read every curve.
const sqlTrendSubjects = `
WITH RECURSIVE pairs AS (
    (SELECT instrument, analyte FROM curves ORDER BY instrument, analyte LIMIT 1)
    UNION ALL
    SELECT n.instrument, n.analyte
    FROM pairs p CROSS JOIN LATERAL (
        SELECT c.instrument, c.analyte FROM curves c
        WHERE (c.instrument, c.analyte) > (p.instrument, p.analyte)
        ORDER BY c.instrument, c.analyte LIMIT 1) n
)
SELECT p.instrument, p.analyte, s.n, s.last
FROM (SELECT instrument, analyte FROM pairs LIMIT 500) p
CROSS JOIN LATERAL (
    SELECT count(*)::int AS n, max(r.acquired_at) AS last
    FROM (SELECT c.acquired_at FROM curves c
          WHERE c.instrument = p.instrument AND c.analyte = p.analyte
          ORDER BY c.acquired_at DESC, c.id DESC LIMIT $1 + 1) r) s
ORDER BY p.instrument, p.analyte`

// TrendSubjects lists every instrument and analyte with curves (at most
// 500), for choosing a trend, with the number of curves up to
// lab.MaxTrendPoints (More beyond) and the newest curve's time.
func (db *DB) TrendSubjects(ctx context.Context) ([]lab.TrendSubject, error) {
	return db.trendSubjects(ctx, lab.MaxTrendPoints)
}

func (db *DB) trendSubjects(ctx context.Context, maxCount int) ([]lab.TrendSubject, error) {
	rows, err := db.q(ctx).Query(ctx, sqlTrendSubjects, maxCount)
	if err != nil {
		return nil, classify("trend subjects", err)
	}
	out, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.TrendSubject, error) {
		var s lab.TrendSubject
		err := row.Scan(&s.Instrument, &s.Analyte, &s.Curves, &s.Last)
		if s.Curves > maxCount {
			s.Curves, s.More = maxCount, true
		}
		return s, err
	})
	if err != nil {
		return nil, classify("scan trend subjects", err)
	}
	return out, nil
}
