package store

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// pendingResult is a result about to be inserted for the run sample at
// position of runID.
type pendingResult struct {
	position   int
	curveID    string
	unit       string
	acquiredAt time.Time
	q          lab.Quantity
	state      string
	reason     string
	// reported and isCheck are the result's reported value and IS check
	// (JSON), nil when its analyte has no such rules.
	reported, isCheck []byte
	sequence          []byte // its place in the run's sequence (JSON), nil without one
	uncertainty       []byte // its uncertainty budget (lab.BudgetRecord JSON), nil without one
}

const sqlInsertResult = `
INSERT INTO sample_results (run_sample_id, curve_id, run_id, sample_id, analyte, unit, acquired_at, responses, dilution,
                            mean_response, concentration, standard_error, interval_low, interval_high, interval_level,
                            interval_bounded, interval_method, flags, release_state, release_reason, created_by, reported, is_check, sequence, uncertainty)
SELECT s.id, $3, s.run_id, s.sample_id, s.analyte, $4, $5, s.responses, s.dilution,
       $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18, $19, $20, $21
FROM run_samples s WHERE s.run_id = $1 AND s.position = $2
RETURNING id`

// insertResults stores one result per pending result, in order, and adds a
// created event for each to events.
func insertResults(ctx context.Context, tx pgx.Tx, runID string, rs []pendingResult, actor, cause string, events *eventBuffer) error {
	if len(rs) == 0 {
		return nil
	}
	b := &pgx.Batch{}
	for _, r := range rs {
		q := r.q
		b.Queue(sqlInsertResult, runID, r.position, r.curveID, r.unit, r.acquiredAt, q.Mean, q.Conc, q.SE,
			q.Low, q.High, q.Level, q.Bounded, q.Method, q.Flags, r.state, r.reason, actor, r.reported, r.isCheck, r.sequence, r.uncertainty)
	}
	br := tx.SendBatch(ctx, b)
	for _, r := range rs {
		var id int64
		if err := br.QueryRow().Scan(&id); err != nil {
			_ = br.Close()
			return classify("insert sample result", err)
		}
		events.add(resultEvent{ResultID: id, Kind: lab.EventCreated, Cause: cause, State: r.state, Reason: r.reason})
	}
	if err := br.Close(); err != nil {
		return classify("insert sample results", err)
	}
	return nil
}

const resultColumns = `id, curve_id, run_id, sample_id, analyte, unit, acquired_at, responses, dilution, mean_response,
concentration, standard_error, interval_low, interval_high, interval_level, interval_bounded, interval_method, flags,
release_state, release_reason, state_changed_at, created_at, created_by, reported, is_check, sequence, uncertainty`

func scanResult(row pgx.CollectableRow) (lab.Result, error) {
	var r lab.Result
	err := row.Scan(&r.ID, &r.CurveID, &r.RunID, &r.SampleID, &r.Analyte, &r.Unit, &r.AcquiredAt, &r.Responses,
		&r.Dilution, &r.MeanResponse, &r.Concentration, &r.StandardError, &r.IntervalLow, &r.IntervalHigh,
		&r.IntervalLevel, &r.IntervalBounded, &r.IntervalMethod, &r.Flags, &r.ReleaseState, &r.ReleaseReason,
		&r.StateChangedAt, &r.CreatedAt, &r.CreatedBy, &r.Reported, &r.ISCheck, &r.Sequence, &r.Uncertainty)
	return r, err
}

// resultsWhere reads results matching a condition on sample_results, in
// id order (the order they were written).
func resultsWhere(ctx context.Context, q pgx.Tx, where string, args ...any) ([]lab.Result, error) {
	rows, err := q.Query(ctx, `SELECT `+resultColumns+` FROM sample_results WHERE `+where+` ORDER BY id`, args...)
	if err != nil {
		return nil, classify("select results", err)
	}
	out, err := pgx.CollectRows(rows, scanResult)
	if err != nil {
		return nil, classify("scan results", err)
	}
	return out, nil
}

// readOnly runs fn in a read-only repeatable-read transaction: one snapshot
// for the reads of one answer.
func (db *DB) readOnly(ctx context.Context, op string, fn func(pgx.Tx) error) error {
	if outer := txOf(ctx); outer != nil { // inside Atomically: read the unit's own writes
		if err := savepoint(ctx, outer, fn); err != nil {
			return classify(op, err)
		}
		return nil
	}
	err := pgx.BeginTxFunc(ctx, db.Pool, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly}, fn)
	if err != nil {
		return classify(op, err)
	}
	return nil
}

// RunResults returns every result of run id (results against superseded
// curves included, withheld with the reason), in the order written.
func (db *DB) RunResults(ctx context.Context, id string) ([]lab.Result, error) {
	id, err := parseID("run", id)
	if err != nil {
		return nil, err
	}
	var out []lab.Result
	err = db.readOnly(ctx, "run results "+id, func(tx pgx.Tx) error {
		var one int
		if err := tx.QueryRow(ctx, `SELECT 1 FROM runs WHERE id = $1`, id).Scan(&one); err != nil {
			if errors.Is(err, pgx.ErrNoRows) {
				return lab.Errorf(lab.KindNotFound, "run %s not found", id)
			}
			return classify("select run", err)
		}
		out, err = resultsWhere(ctx, tx, `run_id = $1`, id)
		return err
	})
	return out, err
}

// GetResult returns result id as it stands now.
func (db *DB) GetResult(ctx context.Context, id int64) (*lab.Result, error) {
	var out []lab.Result
	err := db.readOnly(ctx, "result", func(tx pgx.Tx) error {
		var err error
		out, err = resultsWhere(ctx, tx, `id = $1`, id)
		return err
	})
	if err != nil {
		return nil, err
	}
	if len(out) == 0 {
		msg := fmt.Sprintf("no result with id %d; result ids are the change feed's result_id and a result's id", id)
		return nil, &lab.Error{Kind: lab.KindNotFound, In: lab.InPath, Field: "/result_id", Message: msg}
	}
	return &out[0], nil
}

// SampleResults returns every result for the LIMS sample id, across runs,
// in the order written; KindNotFound when there is none.
func (db *DB) SampleResults(ctx context.Context, sampleID string) ([]lab.Result, error) {
	var out []lab.Result
	err := db.readOnly(ctx, "sample results", func(tx pgx.Tx) error {
		var err error
		out, err = resultsWhere(ctx, tx, `sample_id = $1`, sampleID)
		return err
	})
	if err != nil {
		return nil, err
	}
	if len(out) == 0 {
		return nil, &lab.Error{Kind: lab.KindNotFound, In: lab.InPath, Field: "/sample_id", Message: "no result for sample id " + sampleID + "; samples are posted with a run or with POST /v1/runs/{id}/samples"}
	}
	return out, nil
}
