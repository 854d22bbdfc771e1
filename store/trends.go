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
	rows, err := db.Pool.Query(ctx, sql, args...)
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
	rows, err := db.Pool.Query(ctx, sqlRecentApprovedSlopes, instrument, analyte, before, limit)
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

// TrendSubjects lists every instrument and analyte with curves (at most
// 500), for choosing a trend. It reads the whole history index, so it is for
// the QA pages, not for hot paths.
func (db *DB) TrendSubjects(ctx context.Context) ([]lab.TrendSubject, error) {
	rows, err := db.Pool.Query(ctx, `
SELECT instrument, analyte, count(*), max(acquired_at) FROM curves
GROUP BY instrument, analyte ORDER BY instrument, analyte LIMIT 500`)
	if err != nil {
		return nil, classify("trend subjects", err)
	}
	out, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.TrendSubject, error) {
		var s lab.TrendSubject
		err := row.Scan(&s.Instrument, &s.Analyte, &s.Curves, &s.Last)
		return s, err
	})
	if err != nil {
		return nil, classify("scan trend subjects", err)
	}
	return out, nil
}
