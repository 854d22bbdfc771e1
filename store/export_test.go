package store

import (
	"context"
	"testing"
	"time"

	"curvekeeper/lab"
)

// HoldRunWrites keeps CreateRun's writes queued: the calls made until
// release queue up, and release writes them in groups as the service would
// after a slow write. waitQueued waits until n are queued.
func HoldRunWrites(db *DB) (waitQueued func(t testing.TB, n int), release func()) {
	r := db.writes()
	r.mu.Lock()
	r.running = r.max // no caller starts a group
	r.mu.Unlock()
	waitQueued = func(t testing.TB, n int) {
		t.Helper()
		deadline := time.Now().Add(10 * time.Second)
		for {
			r.mu.Lock()
			queued := len(r.pending)
			r.mu.Unlock()
			if queued >= n {
				return
			}
			if time.Now().After(deadline) {
				t.Fatalf("%d runs queued after 10 s, want %d", queued, n)
			}
			time.Sleep(time.Millisecond)
		}
	}
	release = func() {
		r.mu.Lock()
		r.running = 1 // the group started here; callers may start one more
		r.mu.Unlock()
		go r.run()
	}
	return waitQueued, release
}

// RunWriteCounts returns how many runs were written in groups and how many
// went alone after their group failed.
func RunWriteCounts(db *DB) (grouped, alone int64) {
	st := db.RunWriteStats()
	return st.Grouped, st.Alone
}

// CreateRunAlone is CreateRun written in a transaction of its own, never in
// a group.
func CreateRunAlone(ctx context.Context, db *DB, in lab.RunInput, curves []lab.CurveInput) (*lab.RunCreated, error) {
	w, created, err := prepareRun(ctx, in, curves)
	if err != nil {
		return nil, err
	}
	return db.createRunAlone(ctx, w, created)
}

// PlanCase is a statement the service runs on every request, with
// parameters of the shape it sends.
type PlanCase struct {
	Name string
	SQL  string
	Args []any
}

// HotStatements are the reads of every ingest and prediction request, and
// of a client following the change feed.
func HotStatements() []PlanCase {
	hash := make([]byte, 32)
	curve := "0190a1b2-c3d4-7e5f-8a9b-0c1d2e3f4a5b"
	return []PlanCase{
		{"token lookup, no curve", sqlTokenLookupOne, []any{hash}},
		{"token lookup with a curve", sqlTokenLookupOneCurve, []any{hash, curve}},
		{"coalesced token lookups", sqlTokenLookups, []any{[][]byte{hash, hash[:31]}, []*string{nil, &curve}}},
		{"idempotency key", sqlSelectKey, []any{curve, "key-1"}},
		{"latest method revision", sqlSelectLatestMethod, []any{"nitrate-ic"}},
		{"recent approved slopes", sqlRecentApprovedSlopes, []any{"ic-1", "nitrate", time.Now(), 20}},
		{"a change feed page", sqlResultFeed(lab.DefaultFeedLimit + 1), []any{int64(41)}},
	}
}

// TrendSubjectsUpTo is TrendSubjects counting each pair's curves up to max.
func TrendSubjectsUpTo(ctx context.Context, db *DB, max int) ([]lab.TrendSubject, error) {
	return db.trendSubjects(ctx, max)
}
