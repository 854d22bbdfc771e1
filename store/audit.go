package store

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// Audit actions written by the store.
const (
	ActionTokenCreate     = "token.create"
	ActionTokenBootstrap  = "token.bootstrap"
	ActionTokenRevoke     = "token.revoke"
	ActionMethodCreate    = "method.create"
	ActionMethodRevise    = "method.revise"
	ActionRunCreate       = "run.create"
	ActionCurveCreate     = "curve.create"
	ActionCurveReview     = "curve.review"
	entityToken           = "token"
	entityMethod          = "method"
	entityRun             = "run"
	entityCurve           = "curve"
	sqlInsertAudit        = `INSERT INTO audit (actor, action, entity_type, entity_id, detail) VALUES ($1, $2, $3, $4, $5)`
	sqlSelectAuditOfCurve = `
SELECT id, at, actor, action, entity_type, entity_id, detail
FROM audit
WHERE (entity_type = 'curve' AND entity_id = $1)
   OR (entity_type = 'run' AND entity_id = $2)
ORDER BY id`
)

// auditDetail marshals the detail of an audit row.
func auditDetail(detail any) ([]byte, error) {
	b, err := json.Marshal(detail)
	if err != nil {
		return nil, fmt.Errorf("store: marshal audit detail: %w", err)
	}
	return b, nil
}

// writeAudit inserts one audit row in tx, the transaction of the write it records.
func writeAudit(ctx context.Context, tx pgx.Tx, actor, action, entityType, entityID string, detail any) error {
	b, err := auditDetail(detail)
	if err != nil {
		return err
	}
	if _, err := tx.Exec(ctx, sqlInsertAudit, actor, action, entityType, entityID, b); err != nil {
		return classify("insert audit "+action, err)
	}
	return nil
}

// ListAudit returns the audit trail of a curve, oldest first: the events of
// the curve itself and of the run it was fitted from.
func (db *DB) ListAudit(ctx context.Context, curveID string) ([]lab.AuditEvent, error) {
	id, err := parseID("curve", curveID)
	if err != nil {
		return nil, err
	}
	var runID string
	err = db.q(ctx).QueryRow(ctx, `SELECT run_id FROM curves WHERE id = $1`, id).Scan(&runID)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "curve %s not found", id)
	}
	if err != nil {
		return nil, classify("select curve "+id, err)
	}
	rows, err := db.q(ctx).Query(ctx, sqlSelectAuditOfCurve, id, runID)
	if err != nil {
		return nil, classify("select audit of curve "+id, err)
	}
	events, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.AuditEvent, error) {
		var e lab.AuditEvent
		err := row.Scan(&e.ID, &e.At, &e.Actor, &e.Action, &e.EntityType, &e.EntityID, &e.Detail)
		return e, err
	})
	if err != nil {
		return nil, classify("scan audit of curve "+id, err)
	}
	return events, nil
}
