package store

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

const (
	actionMaterialCreate = "material.create"
	entityMaterial       = "standard_material"
	materialColumns      = `code, kind, analyte, unit, value, expanded_uncertainty, coverage_factor, tolerance,
       relative_uncertainty, lot, supplier, level, expires_at, prepared_from, prepared_at, preparation, created_at, created_by`
	sqlSelectMaterial = `SELECT ` + materialColumns + ` FROM standard_materials`
	// sqlMaterialLineage reads the named materials and every ancestor.
	sqlMaterialLineage = `
WITH RECURSIVE lineage AS (
    SELECT code, prepared_from FROM standard_materials WHERE code = ANY ($1::text[])
    UNION
    SELECT p.code, p.prepared_from FROM standard_materials p JOIN lineage l ON p.code = l.prepared_from
)
SELECT ` + materialColumns + ` FROM standard_materials WHERE code IN (SELECT code FROM lineage)`
	sqlInsertRunMaterials = `
INSERT INTO run_standard_materials (run_id, material, position)
SELECT $1::uuid, u.material, u.n - 1 FROM unnest((SELECT $2::text[])) WITH ORDINALITY AS u(material, n)`
)

// CreateMaterial stores m with its audit row (KindConflict when its code
// is taken).
func (db *DB) CreateMaterial(ctx context.Context, m lab.Material, actor string) (*lab.Material, error) {
	steps := m.Preparation
	if steps == nil {
		steps = []lab.PrepStep{} // '[]', not 'null'
	}
	prep, err := json.Marshal(steps)
	if err != nil {
		return nil, fmt.Errorf("store: marshal preparation: %w", err)
	}
	var level, parent *string
	if m.Level != "" {
		level = &m.Level
	}
	if m.PreparedFrom != "" {
		parent = &m.PreparedFrom
	}
	var out *lab.Material
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		var err error
		out, err = scanMaterial(tx.QueryRow(ctx, `
INSERT INTO standard_materials (code, kind, analyte, unit, value, expanded_uncertainty, coverage_factor, tolerance,
    relative_uncertainty, lot, supplier, level, expires_at, prepared_from, prepared_at, preparation, created_by)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17)
RETURNING `+materialColumns,
			m.Code, m.Kind, m.Analyte, m.Unit, m.Value, m.Expanded, m.K, m.Tolerance, m.RelativeUncertainty, m.Lot,
			m.Supplier, level, m.ExpiresAt, parent, m.PreparedAt, prep, actor))
		if err != nil {
			if pgCode(err) == codeUniqueViolation {
				return lab.Errorf(lab.KindConflict, "a standard material called %q exists; records are not changed, give the new one its own code", m.Code)
			}
			return classify("insert standard material "+m.Code, err)
		}
		return writeAudit(ctx, tx, actor, actionMaterialCreate, entityMaterial, m.Code,
			map[string]any{"code": m.Code, "kind": m.Kind, "analyte": m.Analyte, "value": m.Value,
				"relative_uncertainty": m.RelativeUncertainty, "lot": m.Lot, "expires_at": m.ExpiresAt,
				"prepared_from": m.PreparedFrom})
	})
	if err != nil {
		return nil, classify("create standard material", err)
	}
	return out, nil
}

// GetMaterial returns the standard material called code.
func (db *DB) GetMaterial(ctx context.Context, code string) (*lab.Material, error) {
	m, err := scanMaterial(db.q(ctx).QueryRow(ctx, sqlSelectMaterial+` WHERE code = $1`, code))
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "no standard material is called %q", code)
	}
	if err != nil {
		return nil, classify("select standard material", err)
	}
	return m, nil
}

// ListMaterials returns every standard material by code.
func (db *DB) ListMaterials(ctx context.Context) ([]lab.Material, error) {
	return db.queryMaterials(ctx, sqlSelectMaterial+` ORDER BY code`)
}

// MaterialLineage returns the materials codes name and all they were
// prepared from.
func (db *DB) MaterialLineage(ctx context.Context, codes []string) (map[string]*lab.Material, error) {
	ms, err := db.queryMaterials(ctx, sqlMaterialLineage, codes)
	if err != nil {
		return nil, err
	}
	out := make(map[string]*lab.Material, len(ms))
	for i := range ms {
		out[ms[i].Code] = &ms[i]
	}
	return out, nil
}

func (db *DB) queryMaterials(ctx context.Context, sql string, args ...any) ([]lab.Material, error) {
	rows, err := db.q(ctx).Query(ctx, sql, args...)
	if err != nil {
		return nil, classify("select standard materials", err)
	}
	defer rows.Close()
	out := []lab.Material{}
	for rows.Next() {
		m, err := scanMaterial(rows)
		if err != nil {
			return nil, classify("scan standard material", err)
		}
		out = append(out, *m)
	}
	if err := rows.Err(); err != nil {
		return nil, classify("select standard materials", err)
	}
	return out, nil
}

func scanMaterial(row pgx.Row) (*lab.Material, error) {
	var (
		m             lab.Material
		level, parent *string
		prep          []byte
	)
	if err := row.Scan(&m.Code, &m.Kind, &m.Analyte, &m.Unit, &m.Value, &m.Expanded, &m.K, &m.Tolerance,
		&m.RelativeUncertainty, &m.Lot, &m.Supplier, &level, &m.ExpiresAt, &parent, &m.PreparedAt, &prep,
		&m.CreatedAt, &m.CreatedBy); err != nil {
		return nil, err
	}
	if level != nil {
		m.Level = *level
	}
	if parent != nil {
		m.PreparedFrom = *parent
	}
	if err := json.Unmarshal(prep, &m.Preparation); err != nil {
		return nil, fmt.Errorf("decode preparation of %s: %w", m.Code, err)
	}
	return &m, nil
}
