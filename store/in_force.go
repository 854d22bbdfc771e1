package store

import (
	"context"
	"encoding/json"
	"fmt"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// inForceScan bounds how many of the newest curves CurveInForce examines
// before it gives up looking for a usable one.
const inForceScan = 200

// CurveInForce returns the curve in force for instrument and analyte at
// moment at: among the curves acquired at or before at that are current (not
// superseded by an exclusion revision) and not rejected, the newest that is
// approved, or that passed its checks and awaits review when its method
// revision allows pending curves in force (QCPolicy.PendingCurvesInForce).
// A newer usable curve supersedes every older one. When the method sets a
// maximum age and the chosen curve is older than that at at, there is no
// curve in force. KindNotFound says why there is none, in words.
func (db *DB) CurveInForce(ctx context.Context, instrument, analyte string, at time.Time) (*lab.InForce, error) {
	var out *lab.InForce
	err := db.readOnly(ctx, "curve in force", func(tx pgx.Tx) error {
		rows, err := tx.Query(ctx, `
SELECT `+prefixed("c.", curveColumns)+`, m.qc
FROM curves c JOIN methods m ON m.name = c.method AND m.revision = c.method_revision
WHERE c.instrument = $1 AND c.analyte = $2 AND c.acquired_at <= $3 AND c.status <> 'rejected'
  AND NOT EXISTS (SELECT 1 FROM exclusions e WHERE e.revision_of = c.id)
ORDER BY c.acquired_at DESC, c.id DESC
LIMIT $4`, instrument, analyte, at, inForceScan)
		if err != nil {
			return classify("select candidate curves", err)
		}
		type candidate struct {
			c  lab.CurveSummary
			qc lab.QCPolicy
		}
		cands, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (candidate, error) {
			var raw []byte
			c, err := scanCurveSummary(row, &raw)
			if err != nil {
				return candidate{}, err
			}
			var qc lab.QCPolicy
			if err := json.Unmarshal(raw, &qc); err != nil {
				return candidate{}, fmt.Errorf("decode qc: %w", err)
			}
			return candidate{c, qc.WithDefaults()}, nil
		})
		if err != nil {
			return classify("scan candidate curves", err)
		}
		var skipped []string
		for _, k := range cands {
			c := k.c
			var basis string
			switch {
			case c.Status == lab.StatusApproved:
				basis = fmt.Sprintf("curve %s, acquired %s, is the newest current curve approved for %s on %s at that moment (approved by %s)",
					c.ID, stamp(c.AcquiredAt), analyte, instrument, c.ReviewedBy)
			case c.Status == lab.StatusPendingReview && c.Verdict == lab.VerdictPass && c.Slope != nil && k.qc.PendingCurvesInForce:
				basis = fmt.Sprintf("curve %s, acquired %s, passed its checks and awaits review; method %s revision %d lets such a curve be in force",
					c.ID, stamp(c.AcquiredAt), c.Method, c.MethodRevision)
			case c.Status == lab.StatusPendingReview && c.Verdict == lab.VerdictPass:
				skipped = append(skipped, fmt.Sprintf("curve %s (acquired %s) awaits review and method %s revision %d keeps pending curves out of force", c.ID, stamp(c.AcquiredAt), c.Method, c.MethodRevision))
				continue
			default:
				skipped = append(skipped, fmt.Sprintf("curve %s (acquired %s) failed its checks and was not approved", c.ID, stamp(c.AcquiredAt)))
				continue
			}
			in := &lab.InForce{Curve: c, Basis: basis}
			if age := k.qc.MaxAge(); age > 0 {
				exp := c.AcquiredAt.Add(age).UTC()
				if at.After(exp) {
					return lab.Errorf(lab.KindNotFound, "no curve in force for %s on %s at %s: the newest usable curve %s, acquired %s, expired at %s (method %s revision %d allows curves %g hours old)",
						analyte, instrument, stamp(at), c.ID, stamp(c.AcquiredAt), stamp(exp), c.Method, c.MethodRevision, k.qc.MaxCurveAgeHours)
				}
				in.ExpiresAt = &exp
			}
			v, ok, err := lastVerification(ctx, tx, c.ID, at)
			if err != nil {
				return err
			}
			if ok {
				in.LastVerification = &v
			}
			out = in
			return nil
		}
		why := "no curve acquired at or before that moment is current and not rejected"
		if len(skipped) > 0 {
			why = strings.Join(skipped, "; ")
		}
		return lab.Errorf(lab.KindNotFound, "no curve in force for %s on %s at %s: %s", analyte, instrument, stamp(at), why)
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// lastVerification returns the latest verification of curveID, or of a
// curve it revises, at or before at; ok is false when there is none.
func lastVerification(ctx context.Context, tx pgx.Tx, curveID string, at time.Time) (v lab.Verification, ok bool, err error) {
	rows, err := tx.Query(ctx, `
SELECT id, curve_id, kind, level, concentration, responses, found, recovery_pct, difference_pct, limit_pct, passed,
       detail, at, created_at, created_by
FROM verifications
WHERE curve_id IN (WITH RECURSIVE lineage (id) AS (
        SELECT $1::uuid
        UNION ALL
        SELECT c.revision_of FROM curves c JOIN lineage l ON c.id = l.id WHERE c.revision_of IS NOT NULL)
    SELECT id FROM lineage) AND at <= $2
ORDER BY at DESC, id DESC LIMIT 1`, curveID, at)
	if err != nil {
		return v, false, classify("select last verification", err)
	}
	vs, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.Verification, error) {
		var v lab.Verification
		err := row.Scan(&v.ID, &v.CurveID, &v.Kind, &v.Level, &v.Concentration, &v.Responses, &v.Found, &v.RecoveryPct,
			&v.DifferencePct, &v.LimitPct, &v.Passed, &v.Detail, &v.At, &v.CreatedAt, &v.CreatedBy)
		return v, err
	})
	if err != nil || len(vs) == 0 {
		return v, false, classify("scan last verification", err)
	}
	return vs[0], true, nil
}

func stamp(t time.Time) string { return t.UTC().Format(time.RFC3339) }

// prefixed qualifies every column of a comma-separated list with p.
func prefixed(p, columns string) string {
	parts := strings.Split(columns, ",")
	for i, c := range parts {
		parts[i] = p + strings.TrimSpace(c)
	}
	return strings.Join(parts, ", ")
}
