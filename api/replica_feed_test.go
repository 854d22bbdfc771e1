package api_test

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"curvekeeper/api"
)

// feedPage is what GET /v1/results answers, as far as the follower needs.
type feedPage struct {
	Events []struct {
		Seq      int64  `json:"seq"`
		ResultID int64  `json:"result_id"`
		Kind     string `json:"kind"`
		Cause    string `json:"cause"`
	} `json:"events"`
	NextCursor string `json:"next_cursor"`
	HasMore    bool   `json:"has_more"`
}

// TestChangeFeedAcrossPrimaryAndReplica follows the change feed through two
// instances, switching at every page: one reads the feed from the read
// replica (a hot standby whose replay the test pauses and resumes, so it
// falls behind and catches up), the other from the primary. Two writers
// post runs with samples and approve curves meanwhile (events created in
// concurrent transactions). The follower must see every event of
// result_events exactly once, in sequence order: a cursor handed out by the
// primary is never ahead of an event the replica will later show, because
// feed writers commit in sequence order (store.ResultFeedLockKey) and a
// standby replays commits in that order.
func TestChangeFeedAcrossPrimaryAndReplica(t *testing.T) {
	t.Parallel()
	e := newReplicaEnv(t)
	ctx := context.Background()
	primaryOnly := newEnvDB(t, api.Config{}, openStore(t, e.pair.PrimaryURL))
	sb := standbyAdmin(t, e.pair)

	const writers, runsEach = 2, 12
	var wg sync.WaitGroup
	var writing atomic.Int32
	writing.Store(writers)
	for w := range writers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			defer writing.Add(-1)
			for i := range runsEach {
				hour := 100 + w*runsEach + i
				body := runBody("nitrate-uv", "photometer-7", baseTime.Add(time.Duration(hour)*time.Hour), standards("nitrate", uint64(hour)))
				body["samples"] = []map[string]any{
					{"id": fmt.Sprintf("FEED-%d-%d-A", w, i), "analyte": "nitrate", "responses": []float64{1.3}},
					{"id": fmt.Sprintf("FEED-%d-%d-B", w, i), "analyte": "nitrate", "responses": []float64{2.6}},
				}
				r := e.postJSON(t, e.poster, "/v1/runs", body)
				if r.status != http.StatusCreated {
					t.Errorf("writer %d: POST /v1/runs: %s", w, r)
					return
				}
				if i%2 == 1 { // approving releases the results: state_changed events
					var created struct {
						Curves []struct {
							ID string `json:"id"`
						} `json:"curves"`
					}
					if err := json.Unmarshal(r.body, &created); err != nil || len(created.Curves) == 0 {
						t.Errorf("writer %d: run created: %v", w, err)
						return
					}
					rv := e.postJSON(t, e.reviewer, "/v1/curves/"+created.Curves[0].ID+"/review",
						map[string]any{"decision": "approve", "reason": "feed test: QA round"})
					if rv.status != http.StatusOK {
						t.Errorf("writer %d: review: %s", w, rv)
						return
					}
				}
			}
		}()
	}
	// The standby falls behind and catches up while the writers write;
	// the service checks it as Watch does.
	stop := make(chan struct{})
	var lagWG sync.WaitGroup
	lagWG.Add(1)
	go func() {
		defer lagWG.Done()
		paused := false
		for k := 0; ; k++ {
			select {
			case <-stop:
				return
			case <-time.After(40 * time.Millisecond):
			}
			if k%4 == 0 {
				fn := "pg_wal_replay_pause"
				if paused {
					fn = "pg_wal_replay_resume"
				}
				if _, err := sb.Exec(ctx, `SELECT `+fn+`()`); err != nil {
					t.Errorf("%s: %v", fn, err)
					return
				}
				paused = !paused
			}
			if err := e.db.Refresh(ctx); err != nil {
				t.Errorf("Refresh: %v", err)
				return
			}
		}
	}()

	seen := map[int64]int{}
	var order []int64
	cursor := ""
	var replicaPages, replicaEvents, primaryEvents, emptyReplicaPages int
	follow := func(page int) (n int) {
		t.Helper()
		path := "/v1/results?limit=5"
		if cursor != "" {
			path += "&cursor=" + cursor
		}
		var r reply
		onReplica := page%2 == 0
		if onReplica {
			reads := e.db.Replicas()[0].Reads
			r = e.get(t, e.admin, path)
			if e.db.Replicas()[0].Reads > reads {
				replicaPages++
			} else {
				onReplica = false // the replica was not in use for this page
			}
		} else {
			r = primaryOnly.get(t, primaryOnly.admin, path)
		}
		p := decode[feedPage](t, r, http.StatusOK)
		for _, ev := range p.Events {
			seen[ev.Seq]++
			order = append(order, ev.Seq)
		}
		switch {
		case onReplica && len(p.Events) == 0:
			emptyReplicaPages++
		case onReplica:
			replicaEvents += len(p.Events)
		default:
			primaryEvents += len(p.Events)
		}
		cursor = p.NextCursor
		return len(p.Events)
	}
	page := 0
	for writing.Load() > 0 {
		follow(page)
		page++
		time.Sleep(15 * time.Millisecond) // within the admin token's rate limit
	}
	wg.Wait()
	close(stop)
	lagWG.Wait()
	if _, err := sb.Exec(ctx, `SELECT pg_wal_replay_resume()`); err != nil {
		t.Fatal(err)
	}
	e.catchUp(t)
	// Drain: until both instances answer an empty page in a row.
	for empty := 0; empty < 2; page++ {
		if follow(page) == 0 {
			empty++
		} else {
			empty = 0
		}
	}

	rows, err := e.db.Pool.Query(ctx, `SELECT seq FROM result_events ORDER BY seq`)
	if err != nil {
		t.Fatal(err)
	}
	var all []int64
	for rows.Next() {
		var s int64
		if err := rows.Scan(&s); err != nil {
			t.Fatal(err)
		}
		all = append(all, s)
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	want := writers * runsEach * 2 // created events; approvals add state_changed ones
	if len(all) < want {
		t.Fatalf("result_events holds %d events, want at least %d", len(all), want)
	}
	for _, s := range all {
		if seen[s] != 1 {
			t.Errorf("event %d seen %d times, want once", s, seen[s])
		}
	}
	if len(order) != len(all) {
		t.Errorf("the follower saw %d events, the primary holds %d", len(order), len(all))
	}
	for i := 1; i < len(order); i++ {
		if order[i] <= order[i-1] {
			t.Errorf("event %d after %d: out of sequence order", order[i], order[i-1])
		}
	}
	t.Logf("%d events over %d pages: %d from the replica (%d replica pages, %d of them empty while it lagged), %d from the primary",
		len(order), page, replicaEvents, replicaPages, emptyReplicaPages, primaryEvents)
	if replicaEvents == 0 || primaryEvents == 0 {
		t.Errorf("events from the replica %d, from the primary %d: the follower did not read from both", replicaEvents, primaryEvents)
	}
	if ready := e.get(t, "", "/readyz"); ready.status != http.StatusOK {
		t.Errorf("/readyz: %s", ready)
	}
}
