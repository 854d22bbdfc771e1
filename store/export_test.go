package store

import (
	"context"
	"testing"
	"time"
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
func CreateRunAlone(ctx context.Context, db *DB, in RunInput, curves []CurveInput) (*RunCreated, error) {
	w, created, err := prepareRun(ctx, in, curves)
	if err != nil {
		return nil, err
	}
	return db.createRunAlone(ctx, w, created)
}
