package store

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/base64"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"

	"curvekeeper/calib"
	"curvekeeper/lab"
)

const curveColumns = `id, run_id, revision_of, method, method_revision, instrument, analyte, unit, model, weighting,
verdict, status, engine_version, acquired_at, created_at, created_by, reviewed_at, reviewed_by,
slope, intercept, residual_sd, r_squared, lod, failed_checks, is_response`

func scanCurveSummary(row pgx.Row, extra ...any) (lab.CurveSummary, error) {
	var (
		c                    lab.CurveSummary
		revisionOf, reviewer *string
		model, weighting     string
	)
	dest := append([]any{&c.ID, &c.RunID, &revisionOf, &c.Method, &c.MethodRevision, &c.Instrument, &c.Analyte,
		&c.Unit, &model, &weighting, &c.Verdict, &c.Status, &c.EngineVersion, &c.AcquiredAt, &c.CreatedAt,
		&c.CreatedBy, &c.ReviewedAt, &reviewer, &c.Slope, &c.Intercept, &c.ResidualSD, &c.RSquared, &c.LOD,
		&c.FailedChecks, &c.ISResponse}, extra...)
	if err := row.Scan(dest...); err != nil {
		return lab.CurveSummary{}, err
	}
	c.Model, c.Weighting = calib.Model(model), calib.Weighting(weighting)
	if revisionOf != nil {
		c.RevisionOf = *revisionOf
	}
	if reviewer != nil {
		c.ReviewedBy = *reviewer
	}
	return c, nil
}

// GetCurve returns curve id with its decoded report and its review.
func (db *DB) GetCurve(ctx context.Context, id string) (*lab.Curve, error) {
	id, err := parseID("curve", id)
	if err != nil {
		return nil, err
	}
	var (
		report                  []byte
		decision, reason, actor *string
		at                      *time.Time
	)
	summary, err := scanCurveSummary(db.q(ctx).QueryRow(ctx, `
SELECT c.`+strings.ReplaceAll(curveColumns, ", ", ", c.")+`, c.report, r.decision, r.reason, r.actor, r.at
FROM curves c LEFT JOIN reviews r ON r.curve_id = c.id AND r.withdrawn_at IS NULL
WHERE c.id = $1`, id), &report, &decision, &reason, &actor, &at)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "curve %s not found", id)
	}
	if err != nil {
		return nil, classify("select curve "+id, err)
	}
	c := &lab.Curve{CurveSummary: summary, Report: new(calib.Report)}
	if err := json.Unmarshal(report, c.Report); err != nil {
		return nil, fmt.Errorf("store: decode report of curve %s: %w", id, err)
	}
	if decision != nil {
		c.Review = &lab.Review{CurveID: id, Decision: *decision, Reason: *reason, Actor: *actor, At: *at}
	}
	return c, nil
}

// encodeCursor makes the opaque cursor after (acquiredAt, id) for the query
// f: base64url of the time in microseconds (8 bytes), the id (16 bytes) and
// the first 8 bytes of a SHA-256 of f's filters, so that a cursor handed back
// with other filters is refused instead of silently paging another query.
func encodeCursor(acquiredAt time.Time, id string, f lab.CurveFilter) (string, error) {
	u, err := uuid.Parse(id)
	if err != nil {
		return "", fmt.Errorf("store: cursor id: %w", err)
	}
	b := make([]byte, 8, 32)
	binary.BigEndian.PutUint64(b, uint64(acquiredAt.UnixMicro()))
	b = append(b, u[:]...)
	b = append(b, filterDigest(f)...)
	return base64.RawURLEncoding.EncodeToString(b), nil
}

func decodeCursor(s string, f lab.CurveFilter) (time.Time, string, error) {
	b, err := base64.RawURLEncoding.DecodeString(s)
	if err != nil || len(b) != 32 {
		return time.Time{}, "", lab.ParamError(lab.KindInvalid, lab.InQuery, "cursor", "cursor is not one this service issued")
	}
	if !bytes.Equal(b[24:], filterDigest(f)) {
		return time.Time{}, "", lab.ParamError(lab.KindInvalid, lab.InQuery, "cursor", "cursor was issued for other filters; send the same filters as the first page, or start again without a cursor")
	}
	u, _ := uuid.FromBytes(b[8:24])
	return time.UnixMicro(int64(binary.BigEndian.Uint64(b[:8]))).UTC(), u.String(), nil
}

// filterDigest identifies the filters of a history query (not its page size).
func filterDigest(f lab.CurveFilter) []byte {
	h := sha256.New()
	for _, part := range []string{f.Instrument, f.Analyte, f.Method, f.Status, f.Verdict,
		f.From.UTC().Format(time.RFC3339Nano), f.To.UTC().Format(time.RFC3339Nano)} {
		h.Write([]byte(strconv.Quote(part)))
	}
	return h.Sum(nil)[:8]
}

// ListCurves returns curves newest first by (acquired_at, id), one page at a
// time. Pages are cut by keyset on that pair, never by OFFSET, so page 1,000
// costs what page 1 costs and a curve stored between two calls neither shifts
// nor repeats the pages after the cursor.
func (db *DB) ListCurves(ctx context.Context, f lab.CurveFilter) (*lab.CurvePage, error) {
	sql, args, limit, err := curveQuery(f)
	if err != nil {
		return nil, err
	}
	rows, err := db.q(ctx).Query(ctx, sql, args...)
	if err != nil {
		return nil, classify("list curves", err)
	}
	curves, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.CurveSummary, error) {
		return scanCurveSummary(row)
	})
	if err != nil {
		return nil, classify("scan curves", err)
	}
	page := &lab.CurvePage{Curves: curves}
	if len(curves) > limit {
		page.Curves = curves[:limit]
		last := page.Curves[limit-1]
		if page.NextCursor, err = encodeCursor(last.AcquiredAt, last.ID, f); err != nil {
			return nil, err
		}
	}
	return page, nil
}

// ExplainListCurves returns the plan PostgreSQL uses for ListCurves(f), one
// line per row of EXPLAIN (without ANALYZE: nothing is executed). It shows the
// generic plan, the one a long-lived prepared statement may settle on and the
// worse case for index use, because the parameter values are hidden from the
// planner. It runs on a connection taken out of the pool and closed after, so
// its session settings and prepared statement go with it. It is for
// diagnostics, tests and benchmarks.
func (db *DB) ExplainListCurves(ctx context.Context, f lab.CurveFilter) ([]string, error) {
	sql, args, _, err := curveQuery(f)
	if err != nil {
		return nil, err
	}
	values := make([]string, len(args))
	for i, a := range args {
		switch v := a.(type) {
		case string:
			values[i] = "'" + strings.ReplaceAll(v, "'", "''") + "'"
		case time.Time:
			values[i] = "'" + v.UTC().Format(time.RFC3339Nano) + "'"
		case int:
			values[i] = strconv.Itoa(v)
		default:
			return nil, fmt.Errorf("store: explain: unexpected argument type %T", a)
		}
	}
	pooled, err := db.Pool.Acquire(ctx)
	if err != nil {
		return nil, classify("explain list curves", err)
	}
	conn := pooled.Hijack()
	defer conn.Close(context.WithoutCancel(ctx))
	for _, stmt := range []string{`SET plan_cache_mode = force_generic_plan`, `PREPARE ck_explain_curves AS ` + sql} {
		if _, err := conn.Exec(ctx, stmt); err != nil {
			return nil, classify("explain list curves", err)
		}
	}
	q := `EXPLAIN EXECUTE ck_explain_curves`
	if len(values) > 0 {
		q += `(` + strings.Join(values, ", ") + `)`
	}
	rows, err := conn.Query(ctx, q)
	if err != nil {
		return nil, classify("explain list curves", err)
	}
	lines, err := pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		return nil, classify("explain list curves", err)
	}
	return lines, nil
}

// curveQuery builds the history query of f. Only the filters that are set
// appear in the SQL, so each combination gets a plan that can use the index
// leading with its columns. It asks for limit+1 rows to know whether a next
// page exists.
func curveQuery(f lab.CurveFilter) (sql string, args []any, limit int, err error) {
	limit = f.Limit
	switch {
	case limit == 0:
		limit = lab.DefaultCurveLimit
	case limit < 0 || limit > lab.MaxCurveLimit:
		return "", nil, 0, lab.ParamError(lab.KindInvalid, lab.InQuery, "limit", "limit must be between 1 and %d", lab.MaxCurveLimit)
	}
	if f.Status != "" && !slices.Contains([]string{lab.StatusPendingReview, lab.StatusApproved, lab.StatusRejected}, f.Status) {
		return "", nil, 0, lab.ParamError(lab.KindInvalid, lab.InQuery, "status", "unknown status %q", f.Status)
	}
	if f.Verdict != "" && f.Verdict != lab.VerdictPass && f.Verdict != lab.VerdictFail {
		return "", nil, 0, lab.ParamError(lab.KindInvalid, lab.InQuery, "verdict", "unknown verdict %q", f.Verdict)
	}
	var where []string
	add := func(cond string, v any) {
		args = append(args, v)
		where = append(where, strings.ReplaceAll(cond, "?", "$"+strconv.Itoa(len(args))))
	}
	for _, eq := range []struct{ col, v string }{
		{"instrument", f.Instrument}, {"analyte", f.Analyte}, {"method", f.Method},
	} {
		if eq.v != "" {
			add(eq.col+" = ?", eq.v)
		}
	}
	// Status and verdict were checked against their fixed sets above, so they
	// are written as literals: a generic plan can then still prove the
	// partial index curves_pending applies.
	if f.Status != "" {
		where = append(where, "status = '"+f.Status+"'")
	}
	if f.Verdict != "" {
		where = append(where, "verdict = '"+f.Verdict+"'")
	}
	if !f.From.IsZero() {
		add("acquired_at >= ?", f.From)
	}
	if !f.To.IsZero() {
		add("acquired_at < ?", f.To)
	}
	if f.Cursor != "" {
		at, id, err := decodeCursor(f.Cursor, f)
		if err != nil {
			return "", nil, 0, err
		}
		args = append(args, at, id)
		where = append(where, fmt.Sprintf("(acquired_at, id) < ($%d, $%d)", len(args)-1, len(args)))
	}
	sql = `SELECT ` + curveColumns + ` FROM curves`
	if len(where) > 0 {
		sql += ` WHERE ` + strings.Join(where, ` AND `)
	}
	args = append(args, limit+1)
	sql += fmt.Sprintf(` ORDER BY acquired_at DESC, id DESC LIMIT $%d`, len(args))
	return sql, args, limit, nil
}

// sqlPartyOf is the party behind the actor expression (lab.ReviewFacts): a
// token's owner when it is a person or an instrument (the token is found by
// the id after the actor's last colon), else the actor itself. A token
// issued without an owner by a token that has none belongs to its issuing
// token (lab.DefaultOwner), which names no one: such tokens stay parties of
// their own.
func sqlPartyOf(actor string) string {
	return `CASE WHEN ` + actor + ` LIKE 'token:%' THEN coalesce(
	(SELECT t.owner FROM tokens t WHERE t.id::text = substring(` + actor + ` from '[^:]+$')
	   AND (t.owner LIKE 'person:%' OR t.owner LIKE 'instrument:%')), ` + actor + `)
	ELSE ` + actor + ` END`
}

// loadReviewFacts reads what lab.CheckReview needs of curve id, whose row
// lock the caller holds: who posted its run, who made it by exclusion, the
// parties behind them and behind reviewer, the method's self-review choice,
// and the revision superseding it.
func loadReviewFacts(ctx context.Context, tx pgx.Tx, id, reviewer string) (*lab.ReviewFacts, error) {
	f := &lab.ReviewFacts{CurveID: id}
	var revisionBy, superseded, postedParty, revisionParty, reviewerParty *string
	var qc []byte
	err := tx.QueryRow(ctx, `
SELECT r.received_by, e.actor, m.qc,
       (SELECT n.curve_id::text FROM exclusions n WHERE n.revision_of = c.id),
       `+sqlPartyOf("r.received_by")+`, `+sqlPartyOf("e.actor")+`, `+sqlPartyOf("$2::text")+`
FROM curves c
JOIN runs r ON r.id = c.run_id
JOIN methods m ON m.name = r.method AND m.revision = r.method_revision
LEFT JOIN exclusions e ON e.curve_id = c.id
WHERE c.id = $1`, id, reviewer).Scan(&f.RunPostedBy, &revisionBy, &qc, &superseded, &postedParty, &revisionParty, &reviewerParty)
	if err != nil {
		return nil, classify("select review facts of curve "+id, err)
	}
	var q lab.QCPolicy
	if err := json.Unmarshal(qc, &q); err != nil {
		return nil, fmt.Errorf("store: decode qc of curve %s's method: %w", id, err)
	}
	f.RevisionBy, f.SupersededBy, f.AllowSelfReview, f.Signatures = deref(revisionBy), deref(superseded), q.AllowSelfReview, q.Signatures
	f.RunPostedByParty, f.RevisionByParty, f.ReviewerParty = deref(postedParty), deref(revisionParty), deref(reviewerParty)
	return f, nil
}

// ReviewCurve records the review of curve id and moves it from
// pending_review to approved (decision "approve") or rejected ("reject"),
// with its audit row, in one transaction. A curve whose verdict is fail can be
// approved only with a reason (KindInvalid otherwise); a curve already
// reviewed is KindConflict, also when two reviews race.
func (db *DB) ReviewCurve(ctx context.Context, id, decision, reason, actor string) (*lab.Review, error) {
	id, err := parseID("curve", id)
	if err != nil {
		return nil, err
	}
	status := map[string]string{lab.DecisionApprove: lab.StatusApproved, lab.DecisionReject: lab.StatusRejected}[decision]
	if status == "" {
		return nil, lab.FieldError("/decision", "decision must be %q or %q", lab.DecisionApprove, lab.DecisionReject)
	}
	var rv *lab.Review
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		rv, err = reviewCurveTx(ctx, tx, id, decision, status, reason, actor, false)
		return err
	})
	if err != nil {
		return nil, classify("review curve "+id, err)
	}
	return rv, nil
}

// reviewCurveTx is ReviewCurve's transition inside tx: the one review in
// effect, the status, its audit row and the results' release states. signed
// says the review is an approval signature's; an unsigned review is refused
// on a method that requires signatures (lab.CheckUnsignedReview).
func reviewCurveTx(ctx context.Context, tx pgx.Tx, id, decision, status, reason, actor string, signed bool) (*lab.Review, error) {
	reason = strings.TrimSpace(reason)
	var rv *lab.Review
	var current, verdict string
	err := tx.QueryRow(ctx, `SELECT status, verdict FROM curves WHERE id = $1 FOR UPDATE`, id).Scan(&current, &verdict)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "curve %s not found", id)
	}
	if err != nil {
		return nil, classify("select curve "+id, err)
	}
	if current != lab.StatusPendingReview {
		return nil, lab.Errorf(lab.KindConflict, "curve %s was already reviewed: it is %s", id, current)
	}
	facts, err := loadReviewFacts(ctx, tx, id, actor)
	if err != nil {
		return nil, err
	}
	if err := lab.CheckReview(*facts, actor); err != nil {
		return nil, err
	}
	if !signed {
		if err := lab.CheckUnsignedReview(*facts); err != nil {
			return nil, err
		}
	}
	if decision == lab.DecisionApprove && verdict == lab.VerdictFail && reason == "" {
		return nil, lab.FieldError("/reason", "a curve that failed its acceptance checks can be approved only with a reason")
	}
	rv = &lab.Review{CurveID: id, Decision: decision, Reason: reason, Actor: actor}
	err = tx.QueryRow(ctx, `INSERT INTO reviews (curve_id, decision, reason, actor) VALUES ($1, $2, $3, $4) RETURNING at`,
		id, decision, reason, actor).Scan(&rv.At)
	if err != nil {
		if pgCode(err) == codeUniqueViolation {
			return nil, &lab.Error{Kind: lab.KindConflict, Message: fmt.Sprintf("curve %s was already reviewed", id), Err: err}
		}
		return nil, classify("insert review", err)
	}
	_, err = tx.Exec(ctx, `UPDATE curves SET status = $2, reviewed_at = $3, reviewed_by = $4 WHERE id = $1`,
		id, status, rv.At, actor)
	if err != nil {
		if pgCode(err) == codeImmutable {
			return nil, &lab.Error{Kind: lab.KindConflict, Message: fmt.Sprintf("curve %s was already reviewed", id), Err: err}
		}
		return nil, classify("update curve status", err)
	}
	if err := writeAudit(ctx, tx, actor, ActionCurveReview, entityCurve, id, map[string]any{
		"decision": decision, "reason": reason, "from": current, "to": status, "verdict": verdict,
	}); err != nil {
		return nil, err
	}
	// The curve's results move with its review (provisional to
	// releasable or withheld), in this transaction.
	events := &eventBuffer{}
	if _, err := refreshCurveResults(ctx, tx, id, lab.CauseReview, events); err != nil {
		return nil, err
	}
	return rv, flushEvents(ctx, tx, events)
}
