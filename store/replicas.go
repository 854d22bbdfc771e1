package store

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"curvekeeper/lab"
)

// This file holds what the service knows of PostgreSQL replication: whether
// its own database is a standby in recovery (then it serves reads only), and
// the read replicas (hot standbys) it may send lag-tolerant reads to.
//
// Both are learnt by Refresh, which the service runs at start and then
// periodically (Watch); a write refused with SQLSTATE 25006 also switches
// the service to read-only at once (NoteError).

// DefaultMaxReplicaLag is the lag above which a replica gets no reads.
const DefaultMaxReplicaLag = 10 * time.Second

// codeReadOnlyTransaction is read_only_sql_transaction, what a hot standby
// answers to any write.
const codeReadOnlyTransaction = "25006"

// maxLagSamples bounds the primary positions kept for measuring lag.
const maxLagSamples = 4096

// recoveryState is DB's part for read-only mode and replicas.
type recoveryState struct {
	readOnly atomic.Bool

	replicas []*replica // set by AttachReplicas before serving, then fixed
	maxLag   time.Duration
	now      func() time.Time
	next     atomic.Uint64 // round robin among usable replicas
	fallback atomic.Uint64 // reads kept on the primary while replicas exist

	refreshMu sync.Mutex  // one Refresh at a time; guards samples
	samples   []lsnSample // primary WAL positions seen, oldest first
}

// lsnSample is the primary's WAL position as a Refresh saw it.
type lsnSample struct {
	lsn uint64
	at  time.Time
}

// replica is one read replica's pool and what the last Refresh found.
type replica struct {
	name  string // DescribeURL: no password
	db    *DB
	state atomic.Pointer[replicaState]
	reads atomic.Uint64
}

type replicaState struct {
	usable bool
	lag    time.Duration // -1: unknown
	replay uint64        // replayed WAL position
	reason string        // why not usable
}

// ReplicaOptions configures AttachReplicas.
type ReplicaOptions struct {
	// MaxLag is the lag above which a replica gets no reads;
	// DefaultMaxReplicaLag when zero.
	MaxLag time.Duration
	// Now is the clock lag is measured with; time.Now when nil. Tests
	// inject theirs.
	Now func() time.Time
}

// AttachReplicas opens a pool on each of urls (hot standbys of the
// primary) for Reader. It does not wait for them to answer: a replica
// that cannot be reached simply gets no reads until a Refresh finds it. It
// must be called once, before the DB serves requests; Refresh then decides
// which replicas are in use.
func (db *DB) AttachReplicas(ctx context.Context, urls []string, opt ReplicaOptions) error {
	if len(db.recov.replicas) > 0 {
		return errors.New("store: replicas attached twice")
	}
	db.recov.maxLag = opt.MaxLag
	if db.recov.maxLag <= 0 {
		db.recov.maxLag = DefaultMaxReplicaLag
	}
	db.recov.now = opt.Now
	if db.recov.now == nil {
		db.recov.now = time.Now
	}
	for _, u := range urls {
		pool, err := newPool(ctx, u, db.appRole)
		if err != nil {
			db.closeReplicas()
			return fmt.Errorf("store: read replica %s: %w", DescribeURL(u), err)
		}
		r := &replica{name: DescribeURL(u), db: &DB{Pool: pool, appRole: db.appRole}}
		r.state.Store(&replicaState{lag: -1, reason: "not checked yet"})
		db.recov.replicas = append(db.recov.replicas, r)
	}
	return nil
}

func (db *DB) closeReplicas() {
	for _, r := range db.recov.replicas {
		r.db.Pool.Close()
	}
}

// ReadOnly reports whether the database was last found to be a standby in
// recovery (or refused a write as one): the service then serves reads only.
func (db *DB) ReadOnly() bool { return db.recov.readOnly.Load() }

// MaxReplicaLag returns the lag bound of the read replicas.
func (db *DB) MaxReplicaLag() time.Duration { return db.recov.maxLag }

// IsReadOnlyError reports whether err is PostgreSQL refusing a write
// because the database is a standby (SQLSTATE 25006).
func IsReadOnlyError(err error) bool { return pgCode(err) == codeReadOnlyTransaction }

// NoteError switches the DB to read-only when err says the database
// refused a write as a standby, and reports whether it did. The next
// Refresh that finds the database writable switches it back.
func (db *DB) NoteError(err error) bool {
	if !IsReadOnlyError(err) {
		return false
	}
	db.recov.readOnly.Store(true)
	return true
}

// sqlPrimaryPosition says whether the service's database is in recovery and
// how far its WAL goes: flushed (a primary; what its WAL senders may stream)
// or replayed (a standby).
const sqlPrimaryPosition = `
SELECT pg_is_in_recovery(),
       coalesce(CASE WHEN pg_is_in_recovery() THEN pg_last_wal_replay_lsn() ELSE pg_current_wal_flush_lsn() END, '0/0')::text`

// sqlInsertLSN is the primary's insert position: it covers every commit so
// far, also one with synchronous_commit=off whose WAL is not written yet.
// A position just past a page header (24 bytes, 40 at a segment's start)
// is moved back to the page boundary, which is where a standby that has
// replayed everything before it reports it stands.
const sqlInsertLSN = `(SELECT l - CASE WHEN (l - '0/0'::pg_lsn) % current_setting('wal_block_size')::int IN (24, 40)
                 THEN (l - '0/0'::pg_lsn) % current_setting('wal_block_size')::int ELSE 0 END
       FROM (SELECT pg_current_wal_insert_lsn() AS l) AS i)`

// sqlReplicaPosition says whether a replica is in recovery and how far it
// has replayed.
const sqlReplicaPosition = `SELECT pg_is_in_recovery(), coalesce(pg_last_wal_replay_lsn(), '0/0')::text`

// Refresh asks the database whether it is in recovery (pg_is_in_recovery)
// and each replica how far it has replayed, and sets read-only mode and the
// replicas in use accordingly. A replica is in use when it is a standby,
// answers, has the schema this binary needs and lags at most the bound.
//
// Lag is measured against the primary's WAL positions that earlier Refresh
// calls saw: a replica that has not replayed the position the primary had
// reached at time t lags at least now − t. So a replica is found lagging
// one check after it falls behind, and an idle primary never makes a
// caught-up replica look stale (as comparing with the last replayed
// commit's time would).
func (db *DB) Refresh(ctx context.Context) error {
	rs := &db.recov
	rs.refreshMu.Lock()
	defer rs.refreshMu.Unlock()
	var inRecovery bool
	var lsnText string
	if err := db.Pool.QueryRow(ctx, sqlPrimaryPosition).Scan(&inRecovery, &lsnText); err != nil {
		return classify("check recovery", err)
	}
	rs.readOnly.Store(inRecovery)
	if len(rs.replicas) == 0 {
		return nil
	}
	now := rs.now()
	if lsn, err := parseLSN(lsnText); err == nil && (len(rs.samples) == 0 || lsn > rs.samples[len(rs.samples)-1].lsn) {
		rs.samples = append(rs.samples, lsnSample{lsn: lsn, at: now})
	}
	minReplay := ^uint64(0)
	for _, r := range rs.replicas {
		st := r.check(ctx, rs.samples, now, rs.maxLag)
		r.state.Store(st)
		if st.reason != "unreachable" && st.replay < minReplay {
			minReplay = st.replay
		}
	}
	rs.pruneSamples(minReplay)
	return nil
}

// check is one replica's part of Refresh.
func (r *replica) check(ctx context.Context, samples []lsnSample, now time.Time, maxLag time.Duration) *replicaState {
	st := &replicaState{lag: -1}
	var inRecovery bool
	var replayText string
	if err := r.db.Pool.QueryRow(ctx, sqlReplicaPosition).Scan(&inRecovery, &replayText); err != nil {
		st.reason = "unreachable"
		return st
	}
	replay, err := parseLSN(replayText)
	if err != nil {
		st.reason = "unreadable replay position"
		return st
	}
	st.replay = replay
	st.lag = 0
	for _, s := range samples {
		if s.lsn > replay {
			st.lag = max(now.Sub(s.at), 0)
			break
		}
	}
	switch {
	case !inRecovery:
		st.reason = "not a standby (promoted, or not a replica of the primary)"
	case st.lag > maxLag:
		st.reason = fmt.Sprintf("lag %s over the bound %s", st.lag.Round(time.Millisecond), maxLag)
	}
	if st.reason != "" {
		return st
	}
	if err := r.db.CheckSchema(ctx); err != nil {
		st.reason = "schema: " + err.Error()
		return st
	}
	st.usable = true
	return st
}

// pruneSamples drops the positions every answering replica has replayed,
// keeping the newest, and keeps at most maxLagSamples (dropping the second
// oldest, so the oldest still bounds the lag from below).
func (rs *recoveryState) pruneSamples(minReplay uint64) {
	i := 0
	for i < len(rs.samples)-1 && rs.samples[i].lsn <= minReplay {
		i++
	}
	rs.samples = rs.samples[i:]
	if len(rs.samples) > maxLagSamples {
		rs.samples = append(rs.samples[:1], rs.samples[2:]...)
	}
}

// Reader returns the handle for a read that tolerates the replicas' lag
// (up to the bound): a replica in use, taken in turn, or db itself when
// none is. The handle's read methods are the DB's; it must not write.
func (db *DB) Reader() *DB { return db.readerAfter(0) }

// ReaderAfter is Reader for a client that wrote at lsn (WriteLSN): only a
// replica that has replayed lsn, as of the last Refresh, serves it, so the
// client reads its own writes. An lsn that does not parse keeps the read on
// db.
func (db *DB) ReaderAfter(lsn string) *DB {
	v, err := parseLSN(lsn)
	if err != nil {
		return db.primaryRead()
	}
	return db.readerAfter(v)
}

func (db *DB) readerAfter(lsn uint64) *DB {
	rs := &db.recov
	n := len(rs.replicas)
	if n == 0 {
		return db
	}
	start := rs.next.Add(1)
	for i := range n {
		r := rs.replicas[(start+uint64(i))%uint64(n)]
		if st := r.state.Load(); st.usable && st.replay >= lsn {
			r.reads.Add(1)
			return r.db
		}
	}
	return db.primaryRead()
}

func (db *DB) primaryRead() *DB {
	if len(db.recov.replicas) > 0 {
		db.recov.fallback.Add(1)
	}
	return db
}

// HasReplicas reports whether read replicas are attached.
func (db *DB) HasReplicas() bool { return len(db.recov.replicas) > 0 }

// PrimaryReads counts the reads Reader kept on the primary while replicas
// were attached (none in use, or none had replayed the client's write).
func (db *DB) PrimaryReads() uint64 { return db.recov.fallback.Load() }

// Replicas reports each read replica as the last Refresh found it.
func (db *DB) Replicas() []lab.ReplicaStatus {
	out := make([]lab.ReplicaStatus, 0, len(db.recov.replicas))
	for _, r := range db.recov.replicas {
		st := r.state.Load()
		out = append(out, lab.ReplicaStatus{Name: r.name, InUse: st.usable, Lag: st.lag, Reason: st.reason, Reads: r.reads.Load()})
	}
	return out
}

// WriteLSN returns the primary's WAL insert position after the writes
// committed so far, for ReaderAfter: a client that carries it back reads
// its own writes. On an idle primary with asynchronous commit, WAL past the
// last commit may stay unwritten until more activity; such a client's reads
// then stay on the primary a little longer, never see stale data.
func (db *DB) WriteLSN(ctx context.Context) (string, error) {
	var lsn string
	if err := db.Pool.QueryRow(ctx, `SELECT `+sqlInsertLSN+`::text`).Scan(&lsn); err != nil {
		return "", classify("read WAL position", err)
	}
	return lsn, nil
}

// InRecovery runs the first Refresh and reports whether the database is a
// standby; startup uses it to skip migrations.
func (db *DB) InRecovery(ctx context.Context) (bool, error) {
	if err := db.Refresh(ctx); err != nil {
		return false, err
	}
	return db.ReadOnly(), nil
}

// Watch runs Refresh every interval until ctx ends, logging each switch
// between read-only and read-write and each replica going in or out of use.
func (db *DB) Watch(ctx context.Context, every time.Duration, log *slog.Logger) {
	t := time.NewTicker(every)
	defer t.Stop()
	wasRO := db.ReadOnly()
	was := db.Replicas()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
		rctx, cancel := context.WithTimeout(ctx, max(every, 2*time.Second))
		err := db.Refresh(rctx)
		cancel()
		if err != nil {
			if ctx.Err() == nil {
				log.Warn("database check failed", "error", err)
			}
			continue
		}
		if ro := db.ReadOnly(); ro != wasRO {
			if ro {
				log.Warn("the database is a standby in recovery: serving reads only")
			} else {
				log.Info("the database accepts writes again (promoted): serving reads and writes")
			}
			wasRO = ro
		}
		now := db.Replicas()
		for i := range now {
			if now[i].InUse != was[i].InUse || (!now[i].InUse && now[i].Reason != was[i].Reason) {
				log.Info("read replica", "replica", now[i].Name, "in_use", now[i].InUse, "reason", now[i].Reason)
			}
		}
		was = now
	}
}

// parseLSN reads PostgreSQL's text form of a WAL position, "16/B374D848".
func parseLSN(s string) (uint64, error) {
	hi, lo, ok := strings.Cut(s, "/")
	if !ok {
		return 0, fmt.Errorf("store: WAL position %q: no slash", s)
	}
	h, err := strconv.ParseUint(hi, 16, 32)
	if err != nil {
		return 0, fmt.Errorf("store: WAL position %q: %w", s, err)
	}
	l, err := strconv.ParseUint(lo, 16, 32)
	if err != nil {
		return 0, fmt.Errorf("store: WAL position %q: %w", s, err)
	}
	return h<<32 | l, nil
}

// ReadsFor returns Reader() when afterLSN is "" and ReaderAfter(afterLSN)
// otherwise: where a lag-tolerant read goes (lab.Topology).
func (db *DB) ReadsFor(afterLSN string) lab.Reader {
	if afterLSN != "" {
		return db.ReaderAfter(afterLSN)
	}
	return db.Reader()
}
