package store

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/calib"
	"curvekeeper/lab"
)

// ActionSamplesAdd is the audit action of samples posted after their run.
const ActionSamplesAdd = "run.samples_add"

// liveCurve is the current curve of one analyte of a run: the run's own fit,
// or the latest exclusion revision of it.
type liveCurve struct {
	id     string
	unit   string
	report *calib.Report
}

// lockLiveCurves locks every curve of run id (in id order, so two callers
// cannot deadlock) and returns the current one of each analyte. While the
// locks are held no review, verification or exclusion of them can commit.
func lockLiveCurves(ctx context.Context, tx pgx.Tx, runID string) (map[string]liveCurve, error) {
	if _, err := tx.Exec(ctx, `SELECT id FROM curves WHERE run_id = $1 ORDER BY id FOR UPDATE`, runID); err != nil {
		return nil, classify("lock curves of run "+runID, err)
	}
	// A new statement: its snapshot sees every revision committed before the
	// locks were granted.
	rows, err := tx.Query(ctx, `
SELECT c.id, c.analyte, c.unit, c.report FROM curves c
WHERE c.run_id = $1 AND NOT EXISTS (SELECT 1 FROM exclusions e WHERE e.revision_of = c.id)`, runID)
	if err != nil {
		return nil, classify("select live curves of run "+runID, err)
	}
	out := map[string]liveCurve{}
	var (
		id, analyte, unit string
		raw               []byte
	)
	_, err = pgx.ForEachRow(rows, []any{&id, &analyte, &unit, &raw}, func() error {
		rep := new(calib.Report)
		if err := json.Unmarshal(raw, rep); err != nil {
			return fmt.Errorf("store: decode report of curve %s: %w", id, err)
		}
		out[analyte] = liveCurve{id: id, unit: unit, report: rep}
		return nil
	})
	if err != nil {
		return nil, classify("scan live curves of run "+runID, err)
	}
	return out, nil
}

// AddSamples stores samples measured after run id was posted and quantifies
// each against the current curve of its analyte in the run, in one
// transaction with their results, their created events and the audit row.
// A sample without AcquiredAt is taken as acquired now. Rules (KindInvalid,
// naming the field): the run has a curve for the analyte; a sample id
// appears once per analyte in the run (with the earlier samples); a sample
// was not acquired before the run's standards.
func (db *DB) AddSamples(ctx context.Context, runID string, samples []lab.Sample, budgets map[string]lab.BudgetContext, actor string) ([]lab.Result, error) {
	runID, err := parseID("run", runID)
	if err != nil {
		return nil, err
	}
	if len(samples) == 0 {
		return nil, lab.FieldError("/samples", "at least one sample is required")
	}
	now := time.Now().UTC()
	in := make([]lab.Sample, len(samples))
	for i, s := range samples {
		in[i] = s
		if err := lab.CheckSample(&in[i], fmt.Sprintf("/samples/%d", i)); err != nil {
			return nil, err
		}
		if in[i].AcquiredAt == nil {
			in[i].AcquiredAt = &now
		}
	}
	var out []lab.Result
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		// The curve locks come first: they serialise writers of this run's
		// samples, so the next position read below is this transaction's own.
		curves, err := lockLiveCurves(ctx, tx, runID)
		if err != nil {
			return err
		}
		var runAt time.Time
		var next int
		err = tx.QueryRow(ctx, `
SELECT r.acquired_at, coalesce((SELECT max(position) + 1 FROM run_samples WHERE run_id = r.id), 0)
FROM runs r WHERE r.id = $1`, runID).Scan(&runAt, &next)
		if errors.Is(err, pgx.ErrNoRows) {
			return lab.Errorf(lab.KindNotFound, "run %s not found", runID)
		}
		if err != nil {
			return classify("select run "+runID, err)
		}
		type key struct{ analyte, id string }
		seen := map[key]bool{}
		rows, err := tx.Query(ctx, `SELECT analyte, sample_id FROM run_samples WHERE run_id = $1`, runID)
		if err != nil {
			return classify("select samples of run "+runID, err)
		}
		var a, sid string
		if _, err := pgx.ForEachRow(rows, []any{&a, &sid}, func() error { seen[key{a, sid}] = true; return nil }); err != nil {
			return classify("scan samples of run "+runID, err)
		}
		var pending []pendingResult
		facts := map[string]*lab.CurveFacts{}
		b := &pgx.Batch{}
		for i, s := range in {
			p := fmt.Sprintf("/samples/%d", i)
			c, ok := curves[s.Analyte]
			if !ok {
				return lab.FieldError(p+"/analyte", "run %s has no curve for the analyte %q to quantify this sample against", runID, s.Analyte)
			}
			if seen[key{s.Analyte, s.ID}] {
				return lab.FieldError(p+"/id", "sample %q of %s is already in run %s; sample ids are unique per analyte within a run", s.ID, s.Analyte, runID)
			}
			seen[key{s.Analyte, s.ID}] = true
			if s.AcquiredAt.Before(runAt) {
				return lab.FieldError(p+"/acquired_at", "a sample cannot be quantified against standards acquired after it (the run was acquired at %s)", runAt.UTC().Format(time.RFC3339))
			}
			f, ok := facts[c.id]
			if !ok {
				if f, err = loadCurveFacts(ctx, tx, c.id); err != nil {
					return err
				}
				facts[c.id] = f
			}
			state, reason := lab.ReleaseOf(f, *s.AcquiredAt)
			b.Queue(sqlInsertSample, runID, next+i, s.ID, s.Analyte, s.Responses, s.Dilution, s.AcquiredAt)
			budget, err := lab.BudgetJSON(c.report, s.Responses, s.Dilution, budgets[s.Analyte])
			if err != nil {
				return err
			}
			pending = append(pending, pendingResult{position: next + i, curveID: c.id, unit: c.unit, acquiredAt: *s.AcquiredAt,
				q: lab.Quantify(c.report, s.Responses, s.Dilution), state: state, reason: reason, uncertainty: budget})
		}
		if err := tx.SendBatch(ctx, b).Close(); err != nil {
			if pgCode(err) == codeUniqueViolation {
				return &lab.Error{Kind: lab.KindConflict, Message: "a sample with the same id was added to this run concurrently", Err: err}
			}
			return classify("insert samples of run "+runID, err)
		}
		events := &eventBuffer{}
		if err := insertResults(ctx, tx, runID, pending, actor, lab.CauseSamplesAdd, events); err != nil {
			return err
		}
		ids := make([]string, 0, len(in))
		for _, s := range in {
			ids = append(ids, s.ID)
		}
		if err := writeAudit(ctx, tx, actor, ActionSamplesAdd, entityRun, runID, map[string]any{"samples": ids, "first_position": next}); err != nil {
			return err
		}
		if err := flushEvents(ctx, tx, events); err != nil {
			return err
		}
		out, err = resultsWhere(ctx, tx, `run_id = $1 AND run_sample_id IN (SELECT id FROM run_samples WHERE run_id = $1 AND position >= $2)`, runID, next)
		return err
	})
	if err != nil {
		return nil, classify("add samples to run "+runID, err)
	}
	return out, nil
}
