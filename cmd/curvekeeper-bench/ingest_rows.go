package main

import (
	"context"
	"crypto/sha256"
	"encoding/json"
	"fmt"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"curvekeeper/calib"
)

// The ingest_same_rows line compares the service with a second baseline: a
// pgxpool that writes every row the service writes for a run, not only the
// run and its readings. For each run it decodes the JSON, fits the curve
// with the engine as the service does, marshals the report and inserts, in
// one transaction: the idempotency key with a response body, the run, its
// 16 readings, the curve with its report, and the run's and the curve's
// audit rows, into copies of those tables (the same columns, defaults,
// checks, indexes, compression and foreign keys). It makes none of the
// service's reads (token, key, method, recent slopes) and answers no HTTP.
// The line has no target: it shows how much of the service's cost is the
// rows it must keep, next to the baseline, which keeps fewer.
const sameRowsSchema = `
CREATE TABLE bench_baseline.curves (LIKE public.curves INCLUDING ALL);
ALTER TABLE bench_baseline.curves ADD FOREIGN KEY (run_id) REFERENCES bench_baseline.runs (id);
ALTER TABLE bench_baseline.curves ADD FOREIGN KEY (method, method_revision) REFERENCES public.methods (name, revision);
CREATE TABLE bench_baseline.idempotency_keys (LIKE public.idempotency_keys INCLUDING ALL);
ALTER TABLE bench_baseline.idempotency_keys ADD FOREIGN KEY (token_id) REFERENCES public.tokens (id);
ALTER TABLE bench_baseline.idempotency_keys ADD FOREIGN KEY (run_id) REFERENCES bench_baseline.runs (id)
    DEFERRABLE INITIALLY DEFERRED;
CREATE TABLE bench_baseline.audit (LIKE public.audit INCLUDING ALL);`

// LIKE copies neither column compression nor foreign keys; the service's
// tables compress these columns with lz4 where the server has it
// (migration 000004).
const sameRowsCompression = `
DO $$
BEGIN
    IF EXISTS (SELECT 1 FROM pg_settings
               WHERE name = 'default_toast_compression' AND 'lz4' = ANY (enumvals)) THEN
        ALTER TABLE bench_baseline.curves ALTER COLUMN report SET COMPRESSION lz4;
        ALTER TABLE bench_baseline.runs ALTER COLUMN payload SET COMPRESSION lz4;
        ALTER TABLE bench_baseline.idempotency_keys ALTER COLUMN response_body SET COMPRESSION lz4;
        ALTER TABLE bench_baseline.audit ALTER COLUMN detail SET COMPRESSION lz4;
    END IF;
END
$$`

const (
	sameRowsKey = `
INSERT INTO bench_baseline.idempotency_keys (token_id, key, request_hash, run_id, response_status, response_body)
VALUES ($1, $2, $3, $4, 201, $5)`
	sameRowsCurve = `
INSERT INTO bench_baseline.curves (id, run_id, method, method_revision, instrument, analyte, unit, model, weighting,
                                   verdict, engine_version, report, acquired_at, created_by, slope, intercept,
                                   residual_sd, r_squared, lod, failed_checks)
VALUES ($1, $2, $3, 1, $4, $5, 'mg/L', $6, $7, $8, $9, $10, $11, 'token:bench', $12, $13, $14, $15, $16, $17)`
	sameRowsAudit = `
INSERT INTO bench_baseline.audit (actor, action, entity_type, entity_id, detail)
VALUES ('token:bench', 'run.create', 'run', $1, $2), ('token:bench', 'curve.create', 'curve', $3, $4)`
)

// sameRowsTables makes the extra baseline tables (after baselineIngestPool
// made runs and readings) and finds the instrument token's id, which the
// keys refer to.
func (h *harness) sameRowsTables(ctx context.Context, pool *pgxpool.Pool) (tokenID string, err error) {
	if _, err := pool.Exec(ctx, sameRowsSchema); err != nil {
		return "", fmt.Errorf("create the same-rows baseline tables: %w", err)
	}
	if _, err := pool.Exec(ctx, sameRowsCompression); err != nil {
		return "", fmt.Errorf("set the same-rows baseline's compression: %w", err)
	}
	if err := pool.QueryRow(ctx, `SELECT id::text FROM tokens WHERE name = 'bench-instrument'`).Scan(&tokenID); err != nil {
		return "", fmt.Errorf("find the instrument token: %w", err)
	}
	return tokenID, nil
}

// benchFitOptions are the bench method's options (run.go creates it).
var benchFitOptions = calib.Options{Model: calib.Linear, Weighting: calib.WeightInvX2, Policy: calib.DefaultPolicy()}

// insertSameRows is one run of the same-rows baseline.
func insertSameRows(ctx context.Context, pool *pgxpool.Pool, tokenID string, body []byte, key string) error {
	var r runReq
	if err := json.Unmarshal(body, &r); err != nil {
		return err
	}
	var (
		pts                  []calib.Point
		analytes, levels     []string
		replicates, position []int32
		concs, responses     []float64
	)
	for i, s := range r.Standards {
		for k, y := range s.Responses {
			pts = append(pts, calib.Point{Level: s.Level, X: s.Concentration, Y: y})
			analytes, levels = append(analytes, s.Analyte), append(levels, s.Level)
			replicates, position = append(replicates, int32(k+1)), append(position, int32(i))
			concs, responses = append(concs, s.Concentration), append(responses, y)
		}
	}
	rep, err := calib.Fit(pts, benchFitOptions)
	if err != nil {
		return err
	}
	report, err := json.Marshal(rep)
	if err != nil {
		return err
	}
	failed := []string{} // failed_checks is NOT NULL
	for _, c := range rep.Checks {
		if c.Computed && !c.Passed {
			failed = append(failed, c.Name)
		}
	}
	runID, err := newUUIDv7()
	if err != nil {
		return err
	}
	curveID, err := newUUIDv7()
	if err != nil {
		return err
	}
	response, err := json.Marshal(map[string]any{"id": runID, "curves": []map[string]string{
		{"id": curveID.String(), "analyte": benchAnalyte, "verdict": rep.Verdict}}})
	if err != nil {
		return err
	}
	runAudit, err := json.Marshal(map[string]any{"method": r.Method, "method_revision": 1, "instrument": r.Instrument,
		"acquired_at": r.AcquiredAt, "source_format": "json", "standards": len(r.Standards), "readings": len(pts),
		"samples": 0, "curves": []string{curveID.String()}, "idempotency_key": key})
	if err != nil {
		return err
	}
	curveAudit, err := json.Marshal(map[string]any{"run_id": runID, "analyte": benchAnalyte, "verdict": rep.Verdict,
		"status": "pending_review", "model": rep.Model, "weighting": rep.Weighting, "engine_version": rep.Engine})
	if err != nil {
		return err
	}
	hash := sha256.Sum256(body)
	var intercept, slope float64
	if len(rep.Coefficients) == 2 {
		intercept, slope = rep.Coefficients[0], rep.Coefficients[1]
	}
	return pgx.BeginFunc(ctx, pool, func(tx pgx.Tx) error {
		b := &pgx.Batch{}
		b.Queue(sameRowsKey, tokenID, key, hash[:], runID, response)
		b.Queue(baselineInsertRun, runID, r.Method, 1, r.Instrument, r.AcquiredAt, nil, "token:bench", "json", hash[:], body)
		b.Queue(baselineInsertReadings, runID, analytes, levels, replicates, position, concs, responses)
		b.Queue(sameRowsCurve, curveID, runID, r.Method, r.Instrument, benchAnalyte, string(rep.Model), string(rep.Weighting),
			rep.Verdict, rep.Engine, report, r.AcquiredAt, slope, intercept, rep.ResidualSD, rep.RSquared, rep.Limits.LOD, failed)
		b.Queue(sameRowsAudit, runID.String(), runAudit, curveID.String(), curveAudit)
		return tx.SendBatch(ctx, b).Close()
	})
}
