package store

import (
	"context"
	"encoding/base64"
	"encoding/binary"
	"strconv"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// ResultFeedLockKey names the transaction-level advisory lock every writer
// of result_events holds from the moment it draws its first sequence number
// until it commits or rolls back ("ck_feed").
//
// Why: result_events.seq comes from a sequence, and sequence numbers are
// drawn when a row is inserted, not when its transaction commits. Without
// care, transaction A draws 41, transaction B draws 42 and commits first; a
// reader that pages by seq then serves 42, moves its cursor past 41, and
// never sees 41 when A commits: an event lost for good. Holding this lock
// across the draw and the commit serialises event writers, so numbers are
// handed out in commit order, and a reader's snapshot always holds a prefix
// of the sequence (gaps come only from rolled-back transactions, whose
// numbers no event will ever use). PostgreSQL releases a transaction's locks
// only after its commit is visible to new snapshots, so the next writer's
// numbers are drawn after the previous writer's rows became visible.
//
// The alternatives were weighed: serving only events older than the oldest
// running transaction (pg_snapshot_xmin) holds the feed back behind any long
// transaction in the database and needs a cursor over (xid, seq), whose
// order can differ from cause and effect for one result; SERIALIZABLE does
// not order commits. The lock costs writers of results one commit at a time,
// taken at the very end of the transaction (after every row lock it needs,
// so it cannot deadlock with them), and costs readers nothing.
const ResultFeedLockKey int64 = 0x636b5f66656564 // "ck_feed"

// resultEvent is one event about to be written.
type resultEvent struct {
	ResultID int64
	Kind     string // EventCreated or EventStateChanged
	Cause    string
	State    string
	Previous string // "" for EventCreated
	Reason   string
}

// eventBuffer collects a transaction's events until flushEvents writes them.
type eventBuffer struct{ events []resultEvent }

func (b *eventBuffer) add(e resultEvent) { b.events = append(b.events, e) }

// flushEvents takes the feed lock and writes the buffered events, in the
// order they were added. It must be the transaction's last statement that
// can wait on a lock (audit rows after it are fine).
func flushEvents(ctx context.Context, tx pgx.Tx, b *eventBuffer) error {
	if len(b.events) == 0 {
		return nil
	}
	if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock($1)`, ResultFeedLockKey); err != nil {
		return classify("take the result feed lock", err)
	}
	n := len(b.events)
	ids := make([]int64, n)
	kinds, causes, states, reasons := make([]string, n), make([]string, n), make([]string, n), make([]string, n)
	previous := make([]*string, n)
	for i, e := range b.events {
		ids[i], kinds[i], causes[i], states[i], reasons[i] = e.ResultID, e.Kind, e.Cause, e.State, e.Reason
		if e.Previous != "" {
			p := e.Previous
			previous[i] = &p
		}
	}
	_, err := tx.Exec(ctx, `
INSERT INTO result_events (result_id, kind, cause, release_state, previous_state, reason)
SELECT u.result_id, u.kind, u.cause, u.state, u.previous, u.reason
FROM unnest($1::bigint[], $2::text[], $3::text[], $4::text[], $5::text[], $6::text[])
     WITH ORDINALITY AS u(result_id, kind, cause, state, previous, reason, n)
ORDER BY u.n`, ids, kinds, causes, states, previous, reasons)
	if err != nil {
		return classify("insert result events", err)
	}
	b.events = nil
	return nil
}

// EncodeFeedCursor returns the opaque cursor after sequence number seq
// (base64url of its 8 big-endian bytes); seq 0 is the start of the feed.
func EncodeFeedCursor(seq int64) string {
	b := make([]byte, 8)
	binary.BigEndian.PutUint64(b, uint64(seq))
	return base64.RawURLEncoding.EncodeToString(b)
}

func decodeFeedCursor(s string) (int64, error) {
	if s == "" {
		return 0, nil
	}
	b, err := base64.RawURLEncoding.DecodeString(s)
	if err != nil || len(b) != 8 || int64(binary.BigEndian.Uint64(b)) < 0 {
		return 0, lab.ParamError(lab.KindInvalid, lab.InQuery, "cursor", "the cursor is not one this service issued")
	}
	return int64(binary.BigEndian.Uint64(b)), nil
}

// sqlResultFeed reads one page of the feed, limit events after $1. The
// limit is written into the statement (a validated int, one prepared
// statement per limit in use): with LIMIT $2 PostgreSQL estimates the
// generic plan for a third of the feed (a parallel scan once it holds about
// a million events), finds it dearer than the plans for the values and
// plans the statement anew at every call, which made a page at the tail of
// a 625,000-event feed cost 2.4 times what it costs on a small one. With a
// constant limit the generic plan is the index scan and is kept.
func sqlResultFeed(limit int) string {
	return `
SELECT e.seq, e.at, e.kind, e.cause, e.release_state, coalesce(e.previous_state, ''), e.reason,
       r.id, r.sample_id, r.run_id, r.curve_id, r.analyte, r.unit, r.concentration,
       r.acquired_at, r.dilution, r.standard_error, r.interval_low, r.interval_high, r.interval_level,
       r.interval_bounded, r.interval_method, r.flags, r.reported, r.uncertainty
FROM result_events e JOIN sample_results r ON r.id = e.result_id
WHERE e.seq > $1
ORDER BY e.seq
LIMIT ` + strconv.Itoa(limit)
}

// ResultFeed returns the events after cursor since ("" for the start), in
// sequence order, at most limit (0 means DefaultFeedLimit). Because event
// writers are serialised until commit (ResultFeedLockKey), a page never skips
// an event that commits later: following NextCursor sees every event exactly
// once.
func (db *DB) ResultFeed(ctx context.Context, since string, limit int) (*lab.FeedPage, error) {
	after, err := decodeFeedCursor(since)
	if err != nil {
		return nil, err
	}
	switch {
	case limit == 0:
		limit = lab.DefaultFeedLimit
	case limit < 0 || limit > lab.MaxFeedLimit:
		return nil, lab.ParamError(lab.KindInvalid, lab.InQuery, "limit", "limit must be between 1 and %d", lab.MaxFeedLimit)
	}
	rows, err := db.q(ctx).Query(ctx, sqlResultFeed(limit+1), after)
	if err != nil {
		return nil, classify("read result feed", err)
	}
	events, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.ResultEvent, error) {
		var e lab.ResultEvent
		err := row.Scan(&e.Seq, &e.At, &e.Kind, &e.Cause, &e.State, &e.Previous, &e.Reason,
			&e.ResultID, &e.SampleID, &e.RunID, &e.CurveID, &e.Analyte, &e.Unit, &e.Concentration,
			&e.AcquiredAt, &e.Dilution, &e.StandardError, &e.IntervalLow, &e.IntervalHigh, &e.IntervalLevel,
			&e.IntervalBounded, &e.IntervalMethod, &e.Flags, &e.Reported, &e.Uncertainty)
		return e, err
	})
	if err != nil {
		return nil, classify("scan result feed", err)
	}
	page := &lab.FeedPage{Events: events, NextCursor: EncodeFeedCursor(after)}
	if len(events) > limit {
		page.Events, page.More = events[:limit], true
	}
	if len(page.Events) > 0 {
		page.NextCursor = EncodeFeedCursor(page.Events[len(page.Events)-1].Seq)
	}
	return page, nil
}
