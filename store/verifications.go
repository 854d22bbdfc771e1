package store

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/calib"
	"curvekeeper/lab"
)

// CreateVerification judges a verification standard against curve
// in.CurveID with the tolerance of the curve's method revision
// (QCPolicy.VerificationTolerancePct) and stores it, its audit row and the
// release-state changes it causes (a failure withholds the curve's results
// acquired after it; a pass releases those acquired after it again), in one
// transaction. The curve must have a fit, must not be rejected and must not
// be superseded by a revision (KindConflict naming the rule); the
// verification must not predate the calibration (KindInvalid on /at).
func (db *DB) CreateVerification(ctx context.Context, in lab.VerificationInput) (*lab.Verification, error) {
	curveID, err := parseID("curve", in.CurveID)
	if err != nil {
		return nil, err
	}
	if in.Kind != lab.VerificationInitial && in.Kind != lab.VerificationContinuing {
		return nil, lab.FieldError("/kind", "kind must be %q or %q", lab.VerificationInitial, lab.VerificationContinuing)
	}
	if strings.TrimSpace(in.Level) == "" {
		return nil, lab.FieldError("/level", "level is required")
	}
	if err := lab.CheckTimestamp(lab.InBody, "/acquired_at", in.At); err != nil {
		return nil, err
	}
	id, err := newID()
	if err != nil {
		return nil, err
	}
	var v *lab.Verification
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		var (
			status, verdict string
			acquired        time.Time
			raw, qcRaw      []byte
		)
		err := tx.QueryRow(ctx, `
SELECT c.status, c.verdict, c.acquired_at, c.report, m.qc
FROM curves c JOIN methods m ON m.name = c.method AND m.revision = c.method_revision
WHERE c.id = $1 FOR UPDATE OF c`, curveID).Scan(&status, &verdict, &acquired, &raw, &qcRaw)
		if errors.Is(err, pgx.ErrNoRows) {
			return lab.Errorf(lab.KindNotFound, "curve %s not found", curveID)
		}
		if err != nil {
			return classify("lock curve "+curveID, err)
		}
		var revision *string
		if err := tx.QueryRow(ctx, `SELECT curve_id::text FROM exclusions WHERE revision_of = $1`, curveID).Scan(&revision); err != nil && !errors.Is(err, pgx.ErrNoRows) {
			return classify("select revision of curve "+curveID, err)
		}
		switch {
		case status == lab.StatusRejected:
			return lab.ParamError(lab.KindConflict, lab.InPath, "id", "rule %s: curve %s was rejected in review; a rejected curve quantifies nothing, so it cannot be verified (calibrate again)", lab.RuleCurveNotRejected, curveID)
		case revision != nil:
			return lab.ParamError(lab.KindConflict, lab.InPath, "id", "rule %s: curve %s was superseded by its revision %s; verify against the revision", lab.RuleCurveIsCurrent, curveID, *revision)
		case in.At.Before(acquired):
			return lab.FieldError("/acquired_at", "rule %s: a verification is measured after its calibration (curve acquired at %s)", lab.RuleAfterCalibration, acquired.UTC().Format(time.RFC3339))
		}
		rep := new(calib.Report)
		if err := json.Unmarshal(raw, rep); err != nil {
			return fmt.Errorf("store: decode report of curve %s: %w", curveID, err)
		}
		if len(rep.Coefficients) == 0 {
			return lab.ParamError(lab.KindConflict, lab.InPath, "id", "rule %s: curve %s could not be fitted, so nothing can be read back from it", lab.RuleCurveHasFit, curveID)
		}
		var qc lab.QCPolicy
		if err := json.Unmarshal(qcRaw, &qc); err != nil {
			return fmt.Errorf("store: decode qc of the method of curve %s: %w", curveID, err)
		}
		qc = qc.WithDefaults()
		res, err := rep.Verify(in.Responses, in.Concentration, qc.VerificationTolerancePct)
		if err != nil {
			var ie *calib.InputError
			if errors.As(err, &ie) {
				return lab.FieldError("/"+strings.ReplaceAll(strings.ReplaceAll(ie.Field, "[", "/"), "]", ""), "%s", ie.Reason)
			}
			return fmt.Errorf("store: verify curve %s: %w", curveID, err)
		}
		v = &lab.Verification{ID: id, CurveID: curveID, Kind: in.Kind, Level: in.Level, Concentration: in.Concentration,
			Responses: in.Responses, LimitPct: res.LimitPct, Passed: res.Passed, Detail: res.Detail, At: in.At.UTC(), CreatedBy: in.Actor, Material: in.Material}
		if res.HasFound {
			v.Found, v.RecoveryPct, v.DifferencePct = fptr(res.Found), fptr(res.RecoveryPct), fptr(res.DifferencePct)
		}
		err = tx.QueryRow(ctx, `
INSERT INTO verifications (id, curve_id, kind, level, concentration, responses, found, recovery_pct, difference_pct,
                           limit_pct, passed, detail, at, created_by, material)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, NULLIF($15, ''))
RETURNING created_at`, id, curveID, v.Kind, v.Level, v.Concentration, v.Responses, v.Found, v.RecoveryPct,
			v.DifferencePct, v.LimitPct, v.Passed, v.Detail, v.At, v.CreatedBy, v.Material).Scan(&v.CreatedAt)
		if err != nil {
			return classify("insert verification", err)
		}
		if err := writeAudit(ctx, tx, in.Actor, lab.ActionCurveVerify, entityCurve, curveID, map[string]any{
			"verification_id": id, "kind": v.Kind, "level": v.Level, "concentration": v.Concentration,
			"found": v.Found, "difference_pct": v.DifferencePct, "limit_pct": v.LimitPct, "passed": v.Passed, "at": v.At,
			"material": v.Material,
		}); err != nil {
			return err
		}
		events := &eventBuffer{}
		if v.ResultsChanged, err = refreshCurveResults(ctx, tx, curveID, lab.CauseVerification, events); err != nil {
			return err
		}
		return flushEvents(ctx, tx, events)
	})
	if err != nil {
		return nil, classify("create verification", err)
	}
	return v, nil
}

// ListVerifications returns the verifications of curve id by time.
func (db *DB) ListVerifications(ctx context.Context, id string) ([]lab.Verification, error) {
	id, err := parseID("curve", id)
	if err != nil {
		return nil, err
	}
	var out []lab.Verification
	err = db.readOnly(ctx, "list verifications", func(tx pgx.Tx) error {
		var one int
		if err := tx.QueryRow(ctx, `SELECT 1 FROM curves WHERE id = $1`, id).Scan(&one); err != nil {
			if errors.Is(err, pgx.ErrNoRows) {
				return lab.Errorf(lab.KindNotFound, "curve %s not found", id)
			}
			return classify("select curve", err)
		}
		rows, err := tx.Query(ctx, `
SELECT id, curve_id, kind, level, concentration, responses, found, recovery_pct, difference_pct, limit_pct, passed,
       detail, at, created_at, created_by, coalesce(material, '')
FROM verifications WHERE curve_id = $1 ORDER BY at, id`, id)
		if err != nil {
			return classify("select verifications", err)
		}
		out, err = pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.Verification, error) {
			var v lab.Verification
			err := row.Scan(&v.ID, &v.CurveID, &v.Kind, &v.Level, &v.Concentration, &v.Responses, &v.Found, &v.RecoveryPct,
				&v.DifferencePct, &v.LimitPct, &v.Passed, &v.Detail, &v.At, &v.CreatedAt, &v.CreatedBy, &v.Material)
			return v, err
		})
		return err
	})
	return out, err
}

// ReadTopDownHistory reads the verifications of q's method (every revision)
// and analyte measured in [q.From, q.To) against current curves: not
// rejected in review and not superseded by an exclusion revision (a
// revision keeps its original's verifications for the release states, but
// their recoveries were read from the superseded fit). A reference
// material's certificate u(Cref)/Cref comes with its results.
func (db *DB) ReadTopDownHistory(ctx context.Context, q lab.TopDownQuery) (*lab.TopDownHistory, error) {
	h := &lab.TopDownHistory{Points: []lab.TopDownPoint{}}
	err := db.readOnly(ctx, "read top-down history", func(tx pgx.Tx) error {
		rows, err := tx.Query(ctx, `
SELECT v.id, v.curve_id, v.kind, v.level, v.at, v.concentration, v.found, v.recovery_pct, v.passed,
       coalesce(v.material, ''), coalesce(sm.relative_uncertainty, 0)
FROM verifications v
JOIN curves c ON c.id = v.curve_id
LEFT JOIN standard_materials sm ON sm.code = v.material
WHERE c.method = $1 AND c.analyte = $2 AND v.at >= $3 AND v.at < $4
  AND c.status <> $5
  AND NOT EXISTS (SELECT 1 FROM exclusions n WHERE n.revision_of = c.id)
ORDER BY v.at, v.id`, q.Method, q.Analyte, q.From, q.To, lab.StatusRejected)
		if err != nil {
			return classify("select top-down history", err)
		}
		defer rows.Close()
		for rows.Next() {
			var (
				p          lab.TopDownPoint
				found, rec *float64
			)
			if err := rows.Scan(&p.VerificationID, &p.CurveID, &p.Kind, &p.Level, &p.At, &p.Concentration, &found, &rec,
				&p.Passed, &p.Material, &p.MaterialRelU); err != nil {
				return classify("scan top-down history", err)
			}
			if found == nil || rec == nil {
				h.Unread++
				continue
			}
			p.Found, p.RecoveryPct = *found, *rec
			h.Points = append(h.Points, p)
		}
		return classify("read top-down history", rows.Err())
	})
	if err != nil {
		return nil, err
	}
	return h, nil
}
