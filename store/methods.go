package store

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"reflect"
	"slices"
	"sync"

	"github.com/jackc/pgx/v5"

	"curvekeeper/calib"
	"curvekeeper/lab"
)

// normalisePolicy passes p through its stored JSON form, so that a policy
// compares equal to the one it is stored as.
func normalisePolicy(p calib.Policy) (calib.Policy, []byte, error) {
	b, err := json.Marshal(p)
	if err != nil {
		return calib.Policy{}, nil, fmt.Errorf("store: marshal acceptance: %w", err)
	}
	var out calib.Policy
	if err := json.Unmarshal(b, &out); err != nil {
		return calib.Policy{}, nil, fmt.Errorf("store: unmarshal acceptance: %w", err)
	}
	return out, b, nil
}

// CreateMethod stores in as revision 1 of a new method, or, when a method of
// that name exists, as its next revision. When in equals the latest revision
// in every field, nothing is written and that revision is returned with
// created false. Concurrent calls for one name are serialised by an
// advisory lock, so revisions are numbered without gaps or duplicates.
func (db *DB) CreateMethod(ctx context.Context, in lab.MethodInput, actor string) (m *lab.Method, created bool, err error) {
	in.QC = in.QC.WithDefaults()
	in.Weights = lab.WeightOptionsWithDefaults(in.Weights)
	if err := lab.CheckMethod(in); err != nil {
		return nil, false, err
	}
	qcJSON, err := json.Marshal(in.QC)
	if err != nil {
		return nil, false, fmt.Errorf("store: marshal qc: %w", err)
	}
	policy, policyJSON, err := normalisePolicy(in.Acceptance)
	if err != nil {
		return nil, false, err
	}
	in.Acceptance = policy
	analytesJSON, err := json.Marshal(in.Analytes)
	if err != nil {
		return nil, false, fmt.Errorf("store: marshal analytes: %w", err)
	}
	weightsJSON, err := json.Marshal(in.Weights)
	if err != nil {
		return nil, false, fmt.Errorf("store: marshal weighting options: %w", err)
	}
	standardsJSON, err := json.Marshal(in.Standards)
	if err != nil {
		return nil, false, fmt.Errorf("store: marshal standards policy: %w", err)
	}
	curveJSON, err := json.Marshal(in.Curve)
	if err != nil {
		return nil, false, fmt.Errorf("store: marshal curve parameters: %w", err)
	}
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		m, created = nil, false
		if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock(hashtextextended('curvekeeper.method:' || $1, 0))`, in.Name); err != nil {
			return classify("lock method name", err)
		}
		latest, err := scanMethod(tx.QueryRow(ctx, sqlSelectMethod+` WHERE name = $1 ORDER BY revision DESC LIMIT 1`, in.Name))
		switch {
		case errors.Is(err, pgx.ErrNoRows):
		case err != nil:
			return classify("select method "+in.Name, err)
		case sameMethod(latest, in):
			m = latest
			return nil
		}
		revision := 1
		if latest != nil {
			revision = latest.Revision + 1
		}
		m, err = scanMethod(tx.QueryRow(ctx, `
INSERT INTO methods (name, revision, model, weighting, confidence, analytes, acceptance, created_by, qc, description, weighting_options, standards, curve_parameters)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13)
RETURNING `+methodColumns,
			in.Name, revision, string(in.Model), string(in.Weighting), in.Confidence, analytesJSON, policyJSON, actor, qcJSON,
			in.Description, weightsJSON, standardsJSON, curveJSON))
		if err != nil {
			return classify("insert method "+in.Name, err)
		}
		created = true
		action := ActionMethodCreate
		if revision > 1 {
			action = ActionMethodRevise
		}
		return writeAudit(ctx, tx, actor, action, entityMethod, fmt.Sprintf("%s/%d", m.Name, m.Revision),
			map[string]any{"name": m.Name, "revision": m.Revision, "model": m.Model, "weighting": m.Weighting,
				"confidence": m.Confidence, "analytes": m.Analytes, "acceptance": json.RawMessage(policyJSON),
				"qc": json.RawMessage(qcJSON), "weighting_options": json.RawMessage(weightsJSON),
				"standards": json.RawMessage(standardsJSON), "curve_parameters": json.RawMessage(curveJSON)})
	})
	if err != nil {
		return nil, false, classify("create method", err)
	}
	return m, created, nil
}

func sameMethod(m *lab.Method, in lab.MethodInput) bool {
	return m.Model == in.Model && m.Weighting == in.Weighting && m.Confidence == in.Confidence &&
		m.Description == in.Description &&
		reflect.DeepEqual(m.Analytes, in.Analytes) && reflect.DeepEqual(m.Acceptance, in.Acceptance) &&
		m.QC.Equal(in.QC) && m.Weights == in.Weights && m.Standards == in.Standards &&
		m.Curve.Equal(in.Curve)
}

const (
	methodColumns   = `name, revision, model, weighting, confidence, analytes, acceptance, created_at, created_by, qc, description, weighting_options, standards, curve_parameters`
	sqlSelectMethod = `SELECT ` + methodColumns + ` FROM methods`
)

func scanMethod(row pgx.Row) (*lab.Method, error) {
	return scanMethodVia(row, nil)
}

// methodDecodes keeps decoded method revisions. A revision never changes
// (the methods_immutable trigger refuses it), so a revision decoded once
// decodes the same way every time: the cache is exact on every replica. It
// saves POST /v1/runs the three JSON decodes of its method's row; the row is
// still read, so a new revision is seen at once.
type methodDecodes struct {
	mu sync.Mutex
	m  map[methodKey]*lab.Method
}

type methodKey struct {
	name     string
	revision int
}

// maxMethodDecodes bounds the cache; it starts over when full (a laboratory
// has tens of methods, each with a few revisions).
const maxMethodDecodes = 1024

// scanMethodVia is scanMethod taking the decoded JSON columns from cache
// when it holds the revision; cache may be nil.
func scanMethodVia(row pgx.Row, cache *methodDecodes) (*lab.Method, error) {
	var (
		m                    lab.Method
		model, weighting     string
		analytes, acceptance []byte
		qc, weights          []byte
		standards, curve     []byte
	)
	if err := row.Scan(&m.Name, &m.Revision, &model, &weighting, &m.Confidence, &analytes, &acceptance, &m.CreatedAt, &m.CreatedBy,
		&qc, &m.Description, &weights, &standards, &curve); err != nil {
		return nil, err
	}
	m.Model, m.Weighting = calib.Model(model), calib.Weighting(weighting)
	key := methodKey{m.Name, m.Revision}
	if cache != nil {
		cache.mu.Lock()
		c := cache.m[key]
		cache.mu.Unlock()
		if c != nil {
			// A copy the caller may change.
			m.Analytes, m.Acceptance, m.QC, m.Weights = slices.Clone(c.Analytes), c.Acceptance, c.QC, c.Weights
			m.Standards = c.Standards
			m.Curve = calib.CurveParameters{Start: maps.Clone(c.Curve.Start), Fixed: maps.Clone(c.Curve.Fixed)}
			m.Acceptance.Mandatory = slices.Clone(c.Acceptance.Mandatory)
			return &m, nil
		}
	}
	if err := json.Unmarshal(analytes, &m.Analytes); err != nil {
		return nil, fmt.Errorf("decode analytes of method %s/%d: %w", m.Name, m.Revision, err)
	}
	if err := json.Unmarshal(acceptance, &m.Acceptance); err != nil {
		return nil, fmt.Errorf("decode acceptance of method %s/%d: %w", m.Name, m.Revision, err)
	}
	if err := json.Unmarshal(qc, &m.QC); err != nil {
		return nil, fmt.Errorf("decode qc of method %s/%d: %w", m.Name, m.Revision, err)
	}
	m.QC = m.QC.WithDefaults()
	if err := json.Unmarshal(weights, &m.Weights); err != nil {
		return nil, fmt.Errorf("decode weighting options of method %s/%d: %w", m.Name, m.Revision, err)
	}
	m.Weights = lab.WeightOptionsWithDefaults(m.Weights)
	if err := json.Unmarshal(standards, &m.Standards); err != nil {
		return nil, fmt.Errorf("decode standards policy of method %s/%d: %w", m.Name, m.Revision, err)
	}
	if err := json.Unmarshal(curve, &m.Curve); err != nil {
		return nil, fmt.Errorf("decode curve parameters of method %s/%d: %w", m.Name, m.Revision, err)
	}
	if cache != nil {
		c := m
		c.Analytes, c.Acceptance.Mandatory = slices.Clone(m.Analytes), slices.Clone(m.Acceptance.Mandatory)
		c.Curve = calib.CurveParameters{Start: maps.Clone(m.Curve.Start), Fixed: maps.Clone(m.Curve.Fixed)}
		cache.mu.Lock()
		if cache.m == nil || len(cache.m) >= maxMethodDecodes {
			cache.m = map[methodKey]*lab.Method{}
		}
		cache.m[key] = &c
		cache.mu.Unlock()
	}
	return &m, nil
}

// GetMethod returns the latest revision of method name.
func (db *DB) GetMethod(ctx context.Context, name string) (*lab.Method, error) {
	m, err := scanMethod(db.q(ctx).QueryRow(ctx, sqlSelectMethod+` WHERE name = $1 ORDER BY revision DESC LIMIT 1`, name))
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "method %q not found", name)
	}
	if err != nil {
		return nil, classify("select method "+name, err)
	}
	return m, nil
}

// GetMethodRevision returns revision rev of method name.
func (db *DB) GetMethodRevision(ctx context.Context, name string, rev int) (*lab.Method, error) {
	m, err := scanMethod(db.q(ctx).QueryRow(ctx, sqlSelectMethod+` WHERE name = $1 AND revision = $2`, name, rev))
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "method %q revision %d not found", name, rev)
	}
	if err != nil {
		return nil, classify(fmt.Sprintf("select method %s/%d", name, rev), err)
	}
	return m, nil
}

// ListMethods returns the latest revision of every method, by name.
func (db *DB) ListMethods(ctx context.Context) ([]lab.Method, error) {
	rows, err := db.q(ctx).Query(ctx, `SELECT DISTINCT ON (name) `+methodColumns+` FROM methods ORDER BY name, revision DESC`)
	if err != nil {
		return nil, classify("list methods", err)
	}
	methods, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.Method, error) {
		m, err := scanMethod(row)
		if err != nil {
			return lab.Method{}, err
		}
		return *m, nil
	})
	if err != nil {
		return nil, classify("scan methods", err)
	}
	return methods, nil
}
