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

// storedPayload is the normalised run kept in runs.payload.
type storedPayload struct {
	Method         string           `json:"method"`
	MethodRevision int              `json:"method_revision"`
	Instrument     string           `json:"instrument"`
	AcquiredAt     time.Time        `json:"acquired_at"`
	Operator       string           `json:"operator,omitempty"`
	SourceFormat   string           `json:"source_format"`
	Standards      []lab.Standard   `json:"standards"`
	Samples        []lab.Sample     `json:"samples"`
	Materials      []string         `json:"standard_materials,omitempty"`
	Sequence       *lab.RunSequence `json:"sequence,omitempty"`
}

// preparedCurve is a curve ready to insert: ids assigned, report marshalled.
type preparedCurve struct {
	id        string
	in        lab.CurveInput
	model     string
	weighting string
	verdict   string
	engine    string
	report    []byte
	scalars   curveScalars
	failed    []string // names of the checks that did not pass
}

// curveScalars are the report values copied into columns for trends.
type curveScalars struct {
	slope, intercept, residualSD, rSquared, lod *float64
	isResponse                                  *float64 // mean IS response of the calibrators; nil without an IS
}

func fptr(v float64) *float64 {
	if !calib.Finite(v) {
		return nil
	}
	return &v
}

// failedChecks lists the names of the report's checks that did not pass
// (mandatory or advisory, computed or not), for history without the report.
func failedChecks(r *calib.Report) []string {
	out := []string{}
	for _, c := range r.Checks {
		if !c.Passed {
			out = append(out, c.Name)
		}
	}
	return out
}

// scalarsOf copies slope, intercept, residual SD, R² and LOD out of a report.
// They are NULL when the report has no fit; slope is b1 in every model and
// the intercept b0 (NULL for linear_origin, which has none).
func scalarsOf(r *calib.Report) curveScalars {
	var s curveScalars
	b1, ok := r.Slope()
	if !ok {
		return s
	}
	s.slope = fptr(b1)
	if b0, ok := r.Intercept(); ok {
		s.intercept = fptr(b0)
	}
	s.residualSD, s.rSquared = fptr(r.ResidualSD), fptr(r.RSquared)
	if r.Limits.Computed {
		s.lod = fptr(r.Limits.LOD)
	}
	return s
}

func prepareCurve(c lab.CurveInput) (preparedCurve, error) {
	id, err := newID()
	if err != nil {
		return preparedCurve{}, err
	}
	r := c.Report
	p := preparedCurve{id: id, in: c, model: string(r.Model), weighting: string(r.Weighting),
		verdict: r.Verdict, engine: r.Engine, scalars: scalarsOf(r)}
	if n := len(c.CalibratorIS); n > 0 {
		var sum float64
		for _, v := range c.CalibratorIS {
			sum += v
		}
		p.scalars.isResponse = fptr(sum / float64(n))
	}
	if p.weighting == "" {
		p.weighting = string(r.WeightingRequested)
	}
	if p.engine == "" {
		p.engine = calib.EngineVersion
	}
	if p.verdict != lab.VerdictPass && p.verdict != lab.VerdictFail {
		return preparedCurve{}, fmt.Errorf("store: curve %s: report verdict %q is neither pass nor fail", c.Analyte, r.Verdict)
	}
	p.failed = failedChecks(r)
	if p.report, err = json.Marshal(r); err != nil {
		return preparedCurve{}, fmt.Errorf("store: marshal report of curve %s: %w", c.Analyte, err)
	}
	return p, nil
}

const sqlInsertSample = `
INSERT INTO run_samples (run_id, position, sample_id, analyte, responses, dilution, acquired_at)
VALUES ($1, $2, $3, $4, $5, $6, $7)`

// CreateRun stores a run, its readings and samples, its fitted curves (each
// pending review) and their audit rows in one transaction, and returns the
// ids it assigned. Runs that arrive together are written together, in one
// transaction per group (run_writes.go); a run whose group fails is written
// alone, by createRunAlone, with the same statements.
//
// With an IdempotencyKey the key is claimed first, in the same transaction:
// a concurrent request with the same key (and token) waits for this one to
// finish. If the key was already used with the same RequestHash, nothing is
// written and the original RunCreated is returned with Replayed set; with a
// different hash the result is KindInvalid ("Idempotency-Key reused with a
// different body").
func (db *DB) CreateRun(ctx context.Context, in lab.RunInput, curves []lab.CurveInput) (*lab.RunCreated, error) {
	w, created, err := prepareRun(ctx, in, curves)
	if err != nil {
		return nil, err
	}
	switch err := db.writes().do(w); {
	case err == nil:
		return created, nil
	case !errors.Is(err, errWriteAlone):
		return nil, err
	}
	return db.createRunAlone(ctx, w, created)
}

// prepareRun checks a run and makes everything its write needs but the
// database: ids, marshalled report, payload and response.
func prepareRun(ctx context.Context, in lab.RunInput, curves []lab.CurveInput) (*runWrite, *lab.RunCreated, error) {
	if err := lab.CheckRun(&in, curves); err != nil {
		return nil, nil, err
	}
	runID, err := newID()
	if err != nil {
		return nil, nil, err
	}
	created := &lab.RunCreated{ID: runID, Curves: []lab.CreatedCurve{}}
	prepared := make([]preparedCurve, len(curves))
	for i, c := range curves {
		if prepared[i], err = prepareCurve(c); err != nil {
			return nil, nil, err
		}
		created.Curves = append(created.Curves, lab.CreatedCurve{ID: prepared[i].id, Analyte: c.Analyte, Verdict: prepared[i].verdict})
	}
	if in.CheckAnswer != nil {
		if err := in.CheckAnswer(created); err != nil {
			return nil, nil, err
		}
	}
	body, err := json.Marshal(created)
	if err != nil {
		return nil, nil, fmt.Errorf("store: marshal run response: %w", err)
	}
	samples := in.Samples
	if samples == nil {
		samples = []lab.Sample{}
	}
	payload, err := json.Marshal(storedPayload{Method: in.Method, MethodRevision: in.MethodRevision,
		Instrument: in.Instrument, AcquiredAt: in.AcquiredAt, Operator: in.Operator,
		SourceFormat: in.SourceFormat, Standards: in.Standards, Samples: samples, Materials: in.Materials, Sequence: in.Sequence})
	if err != nil {
		return nil, nil, fmt.Errorf("store: marshal run payload: %w", err)
	}
	return &runWrite{ctx: ctx, in: &in, runID: runID, payload: payload, body: body, curves: prepared}, created, nil
}

// createRunAlone is CreateRun's write in a transaction of its own, for
// every run whose group could not be written (runWrites): it claims the
// idempotency key with ON CONFLICT, so that a key used before is answered
// with a replay, and tells the run's own errors apart.
func (db *DB) createRunAlone(ctx context.Context, w *runWrite, created *lab.RunCreated) (*lab.RunCreated, error) {
	in, runID := w.in, w.runID
	var replay *lab.RunCreated
	err := db.inTx(ctx, func(tx pgx.Tx) error {
		replay = nil
		if in.IdempotencyKey != "" {
			var claimed bool
			err := tx.QueryRow(ctx, sqlClaimKey, in.TokenID, in.IdempotencyKey, in.RequestHash, runID, w.body).Scan(&claimed)
			if errors.Is(err, pgx.ErrNoRows) {
				// Someone holds the key and has committed: replay or refuse.
				replay, err = storedRun(ctx, tx, in.TokenID, in.IdempotencyKey, in.RequestHash)
				if lab.KindOf(err) == lab.KindNotFound {
					return fmt.Errorf("store: idempotency key %q vanished while claimed", in.IdempotencyKey)
				}
				return err
			}
			if err != nil {
				return classify("claim idempotency key", err)
			}
		}
		// A batch is built per attempt: inTx may run this function again.
		// It also quantifies every sample against its analyte's curve, in
		// the transaction that stores it.
		batch, err := runRows([]*runWrite{w}, false)
		if err != nil {
			return err
		}
		if err := tx.SendBatch(ctx, batch).Close(); err != nil {
			if pgCode(err) == codeForeignKeyViolation {
				return &lab.Error{Kind: lab.KindInvalid, Field: "/method",
					Message: fmt.Sprintf("method %q has no revision %d", in.Method, in.MethodRevision), Err: err}
			}
			if pgCode(err) == codeUniqueViolation && pgConstraint(err) == "runs_pkey" {
				// The run's own id, drawn at random for this request: only
				// its group can have stored it, whose commit was reported
				// as failed although it took effect.
				return errStoredByGroup
			}
			if pgCode(err) == codeUniqueViolation {
				return &lab.Error{Kind: lab.KindInvalid, Field: "/samples",
					Message: "a sample id appears twice for one analyte; sample ids are unique per analyte within a run", Err: err}
			}
			return classify("insert run "+runID, err)
		}
		return nil
	})
	if errors.Is(err, errStoredByGroup) {
		return created, nil
	}
	if err != nil {
		return nil, classify("create run", err)
	}
	if replay != nil {
		return replay, nil
	}
	return created, nil
}

// auditRow is one audit row of a write, its detail marshalled.
type auditRow struct {
	actor, action, entityType, entityID string
	detail                              []byte
}

// runAudits are the audit rows of a new run: one for the run and one per
// curve, in that order.
func runAudits(in *lab.RunInput, runID string, curves []preparedCurve) ([]auditRow, error) {
	curveIDs := make([]string, len(curves))
	readings := 0
	for i, c := range curves {
		curveIDs[i] = c.id
	}
	for _, s := range in.Standards {
		readings += len(s.Responses)
	}
	detail := map[string]any{
		"method": in.Method, "method_revision": in.MethodRevision, "instrument": in.Instrument,
		"acquired_at": in.AcquiredAt, "source_format": in.SourceFormat, "standards": len(in.Standards),
		"readings": readings, "samples": len(in.Samples), "curves": curveIDs,
	}
	if in.IdempotencyKey != "" {
		detail["idempotency_key"] = in.IdempotencyKey
	}
	d, err := auditDetail(detail)
	if err != nil {
		return nil, err
	}
	out := make([]auditRow, 0, 1+len(curves))
	out = append(out, auditRow{in.Actor, ActionRunCreate, entityRun, runID, d})
	for _, c := range curves {
		d, err := auditDetail(map[string]any{
			"run_id": runID, "analyte": c.in.Analyte, "verdict": c.verdict, "status": lab.StatusPendingReview,
			"model": c.model, "weighting": c.weighting, "engine_version": c.engine,
		})
		if err != nil {
			return nil, err
		}
		out = append(out, auditRow{in.Actor, ActionCurveCreate, entityCurve, c.id, d})
	}
	return out, nil
}

// runResults quantifies the samples of a new run against its new curves,
// each pending review.
func runResults(in *lab.RunInput, curves []preparedCurve) ([]pendingResult, error) {
	byAnalyte := map[string]*preparedCurve{}
	for i := range curves {
		byAnalyte[curves[i].in.Analyte] = &curves[i]
	}
	seqs := map[string]map[string]lab.SequenceOutcome{}
	for i := range curves {
		o, err := lab.SequenceOutcomes(in, &curves[i].in)
		if err != nil {
			return nil, err
		}
		seqs[curves[i].in.Analyte] = o
	}
	var out []pendingResult
	for i, s := range in.Samples {
		c, ok := byAnalyte[s.Analyte]
		if !ok {
			continue // lab.Ingest refuses such a sample; nothing to quantify it against
		}
		f := &lab.CurveFacts{ID: c.id, Status: lab.StatusPendingReview, Verdict: c.verdict, Fitted: c.scalars.slope != nil, FailedChecks: c.failed}
		at := in.AcquiredAt
		if s.AcquiredAt != nil {
			at = *s.AcquiredAt
		}
		state, reason := lab.ReleaseOf(f, at)
		q := lab.Quantify(c.in.Report, lab.QuantResponses(&c.in, &s), s.Dilution)
		o, err := lab.Outcome(&c.in, &s, &q)
		if err != nil {
			return nil, err
		}
		budget, err := lab.ResultBudgetJSON(&c.in, lab.QuantResponses(&c.in, &s), s.Dilution)
		if err != nil {
			return nil, err
		}
		so := seqs[s.Analyte][s.ID]
		switch {
		case o.Withheld != "":
			state, reason = lab.ReleaseWithheld, o.Withheld
		case so.Withheld != "":
			state, reason = lab.ReleaseWithheld, so.Withheld
			q.Flags = append(q.Flags, lab.FlagSequenceWithheld)
		}
		out = append(out, pendingResult{position: i, curveID: c.id, unit: c.in.Unit, acquiredAt: at,
			q: q, state: state, reason: reason, reported: o.Reported, isCheck: o.ISCheck, sequence: so.Record, uncertainty: budget})
	}
	return out, nil
}

// GetRun returns run id as stored.
func (db *DB) GetRun(ctx context.Context, id string) (*lab.Run, error) {
	id, err := parseID("run", id)
	if err != nil {
		return nil, err
	}
	// One snapshot for the four reads; the rows are immutable, but a
	// repeatable-read transaction also keeps the curve list consistent.
	var run *lab.Run
	err = pgx.BeginTxFunc(ctx, db.Pool, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly}, func(tx pgx.Tx) error {
		var err error
		run, err = readRun(ctx, tx, id)
		return err
	})
	if err != nil {
		return nil, classify("get run "+id, err)
	}
	return run, nil
}

func readRun(ctx context.Context, tx pgx.Tx, id string) (*lab.Run, error) {
	r := &lab.Run{ID: id, Standards: []lab.Standard{}, Samples: []lab.Sample{}, Curves: []lab.CurveRef{}}
	var operator *string
	var sequence, isResponses []byte
	err := tx.QueryRow(ctx, `
SELECT method, method_revision, instrument, acquired_at, operator, received_at, received_by, source_format, payload->'sequence',
       (SELECT jsonb_agg(s.v->'is_responses' ORDER BY s.n) FROM jsonb_array_elements(payload->'standards') WITH ORDINALITY AS s(v, n)
         WHERE EXISTS (SELECT 1 FROM jsonb_array_elements(payload->'standards') x WHERE x ? 'is_responses'))
FROM runs WHERE id = $1`, id).Scan(&r.Method, &r.MethodRevision, &r.Instrument, &r.AcquiredAt, &operator,
		&r.ReceivedAt, &r.ReceivedBy, &r.SourceFormat, &sequence, &isResponses)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "run %s not found", id)
	}
	if err != nil {
		return nil, classify("select run", err)
	}
	if operator != nil {
		r.Operator = *operator
	}
	if len(sequence) > 0 && string(sequence) != "null" {
		r.Sequence = new(lab.RunSequence)
		if err := json.Unmarshal(sequence, r.Sequence); err != nil {
			return nil, fmt.Errorf("store: decode the sequence of run %s: %w", id, err)
		}
	}
	mrows, err := tx.Query(ctx, `SELECT material FROM run_standard_materials WHERE run_id = $1 ORDER BY position`, id)
	if err != nil {
		return nil, classify("select run materials", err)
	}
	if r.Materials, err = pgx.CollectRows(mrows, pgx.RowTo[string]); err != nil {
		return nil, classify("select run materials", err)
	}

	rows, err := tx.Query(ctx, `
SELECT standard, analyte, level, concentration, response FROM readings
WHERE run_id = $1 ORDER BY standard, replicate`, id)
	if err != nil {
		return nil, classify("select readings", err)
	}
	var (
		standard, last int32 = 0, -1
		s              lab.Standard
		response       float64
	)
	_, err = pgx.ForEachRow(rows, []any{&standard, &s.Analyte, &s.Level, &s.Concentration, &response}, func() error {
		if standard != last {
			r.Standards = append(r.Standards, lab.Standard{Analyte: s.Analyte, Level: s.Level, Concentration: s.Concentration})
			last = standard
		}
		cur := &r.Standards[len(r.Standards)-1]
		cur.Responses = append(cur.Responses, response)
		return nil
	})
	if err != nil {
		return nil, classify("scan readings", err)
	}
	// The internal standard's responses are kept in the payload only.
	if err := addISResponses(r, isResponses); err != nil {
		return nil, err
	}

	rows, err = tx.Query(ctx, `SELECT sample_id, analyte, responses, dilution FROM run_samples WHERE run_id = $1 ORDER BY position`, id)
	if err != nil {
		return nil, classify("select samples", err)
	}
	r.Samples, err = pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.Sample, error) {
		var s lab.Sample
		err := row.Scan(&s.ID, &s.Analyte, &s.Responses, &s.Dilution)
		return s, err
	})
	if err != nil {
		return nil, classify("scan samples", err)
	}

	rows, err = tx.Query(ctx, `SELECT id, analyte, verdict, status, coalesce(revision_of::text, '') FROM curves WHERE run_id = $1 ORDER BY analyte, created_at, id`, id)
	if err != nil {
		return nil, classify("select curves of run", err)
	}
	r.Curves, err = pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.CurveRef, error) {
		var c lab.CurveRef
		err := row.Scan(&c.ID, &c.Analyte, &c.Verdict, &c.Status, &c.RevisionOf)
		return c, err
	})
	if err != nil {
		return nil, classify("scan curves of run", err)
	}
	return r, nil
}

// addISResponses gives the run's standards their internal-standard
// responses from the payload's lists (raw: a JSON array with each
// standard's is_responses or null, in order; NULL when no standard has
// any).
func addISResponses(r *lab.Run, raw []byte) error {
	var lists [][]float64
	if len(raw) == 0 {
		return nil
	}
	if err := json.Unmarshal(raw, &lists); err != nil {
		return fmt.Errorf("store: decode the IS responses of run %s: %w", r.ID, err)
	}
	if len(lists) == 0 {
		return nil
	}
	if len(lists) != len(r.Standards) {
		return fmt.Errorf("store: run %s: %d standards, %d lists of IS responses", r.ID, len(r.Standards), len(lists))
	}
	for i := range r.Standards {
		r.Standards[i].ISResponses = lists[i]
	}
	return nil
}
