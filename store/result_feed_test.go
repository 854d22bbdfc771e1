package store_test

import (
	"context"
	"fmt"
	"sync"
	"testing"
	"time"

	"curvekeeper/lab"
	"curvekeeper/store"
)

// feedReader pages through the change feed as a LIMS would, keeping every
// event it was served.
type feedReader struct {
	cursor string
	events []lab.ResultEvent
}

// poll reads pages of size limit until the feed has nothing more now.
func (r *feedReader) poll(t *testing.T, db *store.DB, limit int) {
	t.Helper()
	for {
		page, err := db.ResultFeed(context.Background(), r.cursor, limit)
		if err != nil {
			t.Errorf("ResultFeed: %v", err)
			return
		}
		r.events = append(r.events, page.Events...)
		r.cursor = page.NextCursor
		if !page.More {
			return
		}
	}
}

// checkOrderedOnce fails unless the events have strictly increasing seq
// (so none is served twice) and are exactly the events stored.
func checkOrderedOnce(t *testing.T, db *store.DB, got []lab.ResultEvent) {
	t.Helper()
	for i := 1; i < len(got); i++ {
		if got[i].Seq <= got[i-1].Seq {
			t.Fatalf("event %d has seq %d after seq %d: repeated or out of order", i, got[i].Seq, got[i-1].Seq)
		}
	}
	var want []int64
	rows, err := db.Pool.Query(context.Background(), `SELECT seq FROM result_events ORDER BY seq`)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var s int64
		if err := rows.Scan(&s); err != nil {
			t.Fatal(err)
		}
		want = append(want, s)
	}
	if rows.Err() != nil {
		t.Fatal(rows.Err())
	}
	if len(got) != len(want) {
		t.Fatalf("served %d events, %d stored: some were missed", len(got), len(want))
	}
	for i := range want {
		if got[i].Seq != want[i] {
			t.Fatalf("event %d: served seq %d, stored seq %d", i, got[i].Seq, want[i])
		}
	}
}

// TestResultFeedConcurrentWriters: writers add samples to runs and review
// curves concurrently while a reader pages through the feed three events at
// a time; at the end the reader has every stored event exactly once, in
// order, and every result has its created event.
func TestResultFeedConcurrentWriters(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	const runs, writers, rounds = 3, 4, 3
	var runIDs, curveIDs []string
	for i := 0; i < runs; i++ {
		in, curves := runInput(m, baseTime.Add(time.Duration(i)*time.Hour))
		in.Samples = nil
		created, err := db.CreateRun(ctx, in, curves)
		if err != nil {
			t.Fatalf("CreateRun: %v", err)
		}
		runIDs = append(runIDs, created.ID)
		for _, c := range created.Curves {
			curveIDs = append(curveIDs, c.ID)
		}
	}
	done := make(chan struct{})
	reader := &feedReader{}
	var readerDone sync.WaitGroup
	readerDone.Add(1)
	go func() {
		defer readerDone.Done()
		for {
			select {
			case <-done:
				return
			default:
				reader.poll(t, db, 3)
			}
		}
	}()
	var wg sync.WaitGroup
	for w := 0; w < writers; w++ {
		wg.Add(1)
		go func(w int) {
			defer wg.Done()
			for r := 0; r < rounds; r++ {
				run := runIDs[(w+r)%runs]
				at := baseTime.Add(time.Duration((w+r)%runs)*time.Hour + time.Duration(10+r)*time.Minute)
				samples := []lab.Sample{
					{ID: fmt.Sprintf("W%d-R%d-a", w, r), Analyte: "nitrate", Responses: []float64{4.5}, AcquiredAt: &at},
					{ID: fmt.Sprintf("W%d-R%d-b", w, r), Analyte: "nitrite", Responses: []float64{1.2, 1.3}, Dilution: 5, AcquiredAt: &at},
				}
				if _, err := db.AddSamples(ctx, run, samples, nil, "token:instrument"); err != nil {
					t.Errorf("AddSamples: %v", err)
				}
			}
		}(w)
	}
	wg.Add(1)
	go func() { // a reviewer approves every curve meanwhile: state_changed events
		defer wg.Done()
		for _, id := range curveIDs {
			if _, err := db.ReviewCurve(ctx, id, lab.DecisionApprove, "", "token:qa"); err != nil {
				t.Errorf("ReviewCurve: %v", err)
			}
		}
	}()
	wg.Wait()
	close(done)
	readerDone.Wait()
	reader.poll(t, db, 3) // drain what committed after the reader's last page
	checkOrderedOnce(t, db, reader.events)

	created, changed := map[int64]int{}, 0
	for _, e := range reader.events {
		switch e.Kind {
		case lab.EventCreated:
			created[e.ResultID]++
		case lab.EventStateChanged:
			changed++
		}
	}
	if got, want := len(created), writers*rounds*2; got != want {
		t.Errorf("created events for %d results, want %d", got, want)
	}
	for id, n := range created {
		if n != 1 {
			t.Errorf("result %d has %d created events, want 1", id, n)
		}
	}
	// Replaying each result's events gives the state stored now, and each
	// transition starts from the state the previous event left.
	last := map[int64]string{}
	for _, e := range reader.events {
		prev, seen := last[e.ResultID]
		if e.Kind == lab.EventStateChanged && (!seen || prev != e.Previous) {
			t.Errorf("seq %d: result %d changes from %q but the feed left it %q", e.Seq, e.ResultID, e.Previous, prev)
		}
		last[e.ResultID] = e.State
	}
	for id, state := range last {
		var stored string
		if err := db.Pool.QueryRow(ctx, `SELECT release_state FROM sample_results WHERE id = $1`, id).Scan(&stored); err != nil {
			t.Fatal(err)
		}
		if stored != state {
			t.Errorf("result %d: the feed ends at %q, the result is %q", id, state, stored)
		}
	}
	t.Logf("%d events: %d created, %d state_changed", len(reader.events), len(created), changed)
}

// TestResultFeedWaitsForEarlierWriter shows the ordering rule directly: a
// transaction that holds the feed lock and has drawn a sequence number makes
// a later event writer wait, so the later writer cannot commit a higher
// number first and a reader never passes the earlier one.
func TestResultFeedWaitsForEarlierWriter(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)
	created, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatal(err)
	}
	reader := &feedReader{}
	reader.poll(t, db, 100)
	if len(reader.events) != 2 {
		t.Fatalf("after the run: %d events, want 2 (one per sample)", len(reader.events))
	}

	// Writer A: takes the lock and draws a number, as flushEvents does, but
	// does not commit yet.
	txA, err := db.Pool.Begin(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer txA.Rollback(context.WithoutCancel(ctx))
	if _, err := txA.Exec(ctx, `SELECT pg_advisory_xact_lock($1)`, store.ResultFeedLockKey); err != nil {
		t.Fatal(err)
	}
	var seqA int64
	err = txA.QueryRow(ctx, `
INSERT INTO result_events (result_id, kind, cause, release_state, previous_state, reason)
SELECT id, 'state_changed', 'test.writer_a', release_state, release_state, 'written by the test'
FROM sample_results ORDER BY id LIMIT 1 RETURNING seq`).Scan(&seqA)
	if err != nil {
		t.Fatal(err)
	}

	// Writer B: adds a sample; its events must wait for A.
	bDone := make(chan error, 1)
	go func() {
		at := baseTime.Add(time.Hour)
		_, err := db.AddSamples(ctx, created.ID, []lab.Sample{{ID: "WS-0100", Analyte: "nitrate", Responses: []float64{3}, AcquiredAt: &at}}, nil, "token:instrument")
		bDone <- err
	}()
	waiting := false
	for i := 0; i < 600 && !waiting; i++ {
		err := db.Pool.QueryRow(ctx, `
SELECT EXISTS (SELECT 1 FROM pg_locks WHERE locktype = 'advisory' AND NOT granted
               AND classid = ($1::bigint >> 32)::oid AND objid = ($1::bigint & 4294967295)::oid)`, store.ResultFeedLockKey).Scan(&waiting)
		if err != nil {
			t.Fatal(err)
		}
		select {
		case err := <-bDone:
			t.Fatalf("writer B finished (err %v) while writer A held the feed lock: event writers are not serialised", err)
		default:
		}
		if !waiting {
			time.Sleep(10 * time.Millisecond)
		}
	}
	if !waiting {
		t.Fatal("writer B never waited for the feed lock")
	}
	reader.poll(t, db, 100)
	if len(reader.events) != 2 {
		t.Fatalf("while A is open and B waits the reader saw %d events, want the 2 committed before", len(reader.events))
	}
	if err := txA.Commit(ctx); err != nil {
		t.Fatal(err)
	}
	if err := <-bDone; err != nil {
		t.Fatalf("writer B: %v", err)
	}
	reader.poll(t, db, 1)
	checkOrderedOnce(t, db, reader.events)
	if got := reader.events[2]; got.Seq != seqA || got.Cause != "test.writer_a" {
		t.Errorf("third event = seq %d cause %s, want writer A's seq %d", got.Seq, got.Cause, seqA)
	}
	if got := reader.events[3]; got.SampleID != "WS-0100" || got.Seq <= seqA {
		t.Errorf("fourth event = %s seq %d, want writer B's sample after seq %d", got.SampleID, got.Seq, seqA)
	}
}
