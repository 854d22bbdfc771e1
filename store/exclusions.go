package store

import (
	"context"
	"encoding/json"
	"errors"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// CreateRevision stores a new curve refitted without some readings of
// in.OriginalID, linked to it by revision_of, and in the same transaction:
// the exclusion and its reason, the audit rows, a result against the
// revision for every sample of the run's analyte (created events), and the
// release change of the original's results, now withheld as superseded
// (state_changed events). The original is never changed. Only the current
// curve of a chain can be revised (KindConflict naming the rule otherwise).
// It returns the revision's id.
func (db *DB) CreateRevision(ctx context.Context, in lab.RevisionInput) (string, error) {
	origID, err := parseID("curve", in.OriginalID)
	if err != nil {
		return "", err
	}
	in.Reason = strings.TrimSpace(in.Reason)
	if in.Reason == "" {
		return "", lab.FieldError("/reason", "an exclusion needs a reason")
	}
	if in.Report == nil {
		return "", errors.New("store: revision without a report")
	}
	points, err := json.Marshal(in.Excluded)
	if err != nil {
		return "", err
	}
	var revID string
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		var (
			runID, method, instrument, analyte, unit string
			revision                                 int
			acquired                                 time.Time
		)
		err := tx.QueryRow(ctx, `
SELECT run_id, method, method_revision, instrument, analyte, unit, acquired_at FROM curves WHERE id = $1 FOR UPDATE`,
			origID).Scan(&runID, &method, &revision, &instrument, &analyte, &unit, &acquired)
		if errors.Is(err, pgx.ErrNoRows) {
			return lab.Errorf(lab.KindNotFound, "curve %s not found", origID)
		}
		if err != nil {
			return classify("lock curve "+origID, err)
		}
		var existing string
		err = tx.QueryRow(ctx, `SELECT curve_id::text FROM exclusions WHERE revision_of = $1`, origID).Scan(&existing)
		if err == nil {
			return lab.ParamError(lab.KindConflict, lab.InPath, "id", "rule %s: curve %s was already revised as %s; exclude from the revision", lab.RuleCurveIsCurrent, origID, existing)
		}
		if !errors.Is(err, pgx.ErrNoRows) {
			return classify("select revision of "+origID, err)
		}
		pc, err := prepareCurve(lab.CurveInput{Analyte: analyte, Unit: unit, Report: in.Report})
		if err != nil {
			return err
		}
		revID = pc.id
		_, err = tx.Exec(ctx, `
INSERT INTO curves (id, run_id, revision_of, method, method_revision, instrument, analyte, unit, model, weighting, verdict,
                    engine_version, report, acquired_at, created_by, slope, intercept, residual_sd, r_squared, lod, failed_checks,
                    is_response)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18, $19, $20, $21,
        (SELECT is_response FROM curves WHERE id = $3))`,
			pc.id, runID, origID, method, revision, instrument, analyte, unit, pc.model, pc.weighting, pc.verdict,
			pc.engine, pc.report, acquired, in.Actor, pc.scalars.slope, pc.scalars.intercept, pc.scalars.residualSD,
			pc.scalars.rSquared, pc.scalars.lod, pc.failed)
		if err != nil {
			return classify("insert revision of "+origID, err)
		}
		var rangeReason *string
		if rr := strings.TrimSpace(in.RangeReason); rr != "" {
			rangeReason = &rr
		}
		if _, err := tx.Exec(ctx, `INSERT INTO exclusions (curve_id, revision_of, points, reason, range_reason, actor) VALUES ($1, $2, $3, $4, $5, $6)`,
			pc.id, origID, points, in.Reason, rangeReason, in.Actor); err != nil {
			if pgCode(err) == codeUniqueViolation {
				return &lab.Error{Kind: lab.KindConflict, In: lab.InPath, Field: "/id", Message: "rule " + lab.RuleCurveIsCurrent + ": curve " + origID + " was revised concurrently", Err: err}
			}
			return classify("insert exclusion", err)
		}
		if err := writeAudit(ctx, tx, in.Actor, lab.ActionCurveExclude, entityCurve, origID, map[string]any{
			"revision": pc.id, "points": in.Excluded, "reason": in.Reason, "range_reason": rangeReason, "verdict": pc.verdict,
		}); err != nil {
			return err
		}
		if err := writeAudit(ctx, tx, in.Actor, ActionCurveCreate, entityCurve, pc.id, map[string]any{
			"run_id": runID, "revision_of": origID, "analyte": analyte, "verdict": pc.verdict, "status": lab.StatusPendingReview,
			"model": pc.model, "weighting": pc.weighting, "engine_version": pc.engine,
		}); err != nil {
			return err
		}
		pending, err := revisionResults(ctx, tx, runID, analyte, unit, &pc, in.Budget)
		if err != nil {
			return err
		}
		events := &eventBuffer{}
		if err := insertResults(ctx, tx, runID, pending, in.Actor, lab.CauseExclusion, events); err != nil {
			return err
		}
		if _, err := refreshCurveResults(ctx, tx, origID, lab.CauseExclusion, events); err != nil {
			return err
		}
		return flushEvents(ctx, tx, events)
	})
	if err != nil {
		return "", classify("create revision of "+origID, err)
	}
	return revID, nil
}

// revisionResults quantifies every sample of analyte in run runID against a
// new revision.
func revisionResults(ctx context.Context, tx pgx.Tx, runID, analyte, unit string, pc *preparedCurve, bc lab.BudgetContext) ([]pendingResult, error) {
	rows, err := tx.Query(ctx, `
SELECT s.position, s.responses, s.dilution, coalesce(s.acquired_at, r.acquired_at)
FROM run_samples s JOIN runs r ON r.id = s.run_id
WHERE s.run_id = $1 AND s.analyte = $2 ORDER BY s.position`, runID, analyte)
	if err != nil {
		return nil, classify("select samples for revision", err)
	}
	f := &lab.CurveFacts{ID: pc.id, Status: lab.StatusPendingReview, Verdict: pc.verdict, Fitted: pc.scalars.slope != nil, FailedChecks: pc.failed}
	var (
		out       []pendingResult
		position  int
		responses []float64
		dilution  float64
		at        time.Time
	)
	_, err = pgx.ForEachRow(rows, []any{&position, &responses, &dilution, &at}, func() error {
		state, reason := lab.ReleaseOf(f, at)
		budget, err := lab.BudgetJSON(pc.in.Report, responses, dilution, bc)
		if err != nil {
			return err
		}
		out = append(out, pendingResult{position: position, curveID: pc.id, unit: unit, acquiredAt: at,
			q: lab.Quantify(pc.in.Report, responses, dilution), state: state, reason: reason, uncertainty: budget})
		return nil
	})
	if err != nil {
		return nil, classify("scan samples for revision", err)
	}
	return out, nil
}

// GetExclusion returns the exclusion that made revision id; KindNotFound
// for a curve that is not a revision.
func (db *DB) GetExclusion(ctx context.Context, id string) (*lab.Exclusion, error) {
	id, err := parseID("curve", id)
	if err != nil {
		return nil, err
	}
	e := &lab.Exclusion{CurveID: id}
	var points []byte
	var rr *string
	err = db.q(ctx).QueryRow(ctx, `SELECT revision_of, points, reason, range_reason, actor, at FROM exclusions WHERE curve_id = $1`, id).
		Scan(&e.RevisionOf, &points, &e.Reason, &rr, &e.Actor, &e.At)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "curve %s is not an exclusion revision", id)
	}
	if err != nil {
		return nil, classify("select exclusion "+id, err)
	}
	e.RangeReason = deref(rr)
	if err := json.Unmarshal(points, &e.Points); err != nil {
		return nil, err
	}
	return e, nil
}
