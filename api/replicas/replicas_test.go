// Package replicas_test checks that several service processes can share one
// PostgreSQL database: two api.Server instances, each with its own
// connection pool and curve cache, as two replicas behind a load balancer
// would have.
package replicas_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net/http"
	"net/http/httptest"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"curvekeeper/api"
	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

// replica is one service process: its own pool and server.
func replica(t *testing.T, url string) *httptest.Server {
	t.Helper()
	db, err := store.Open(context.Background(), url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(db.Close)
	srv, err := api.New(api.Config{}, lab.NewService(db), slog.New(slog.DiscardHandler))
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(srv.Handler())
	t.Cleanup(ts.Close)
	return ts
}

type answer struct {
	status   int
	runID    string
	replayed bool
}

func post(t *testing.T, base, token, path, key string, body any) answer {
	t.Helper()
	b, err := json.Marshal(body)
	if err != nil {
		t.Fatal(err)
	}
	req, err := http.NewRequest(http.MethodPost, base+path, bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	req.Header.Set("Authorization", "Bearer "+token)
	req.Header.Set("Content-Type", "application/json")
	if key != "" {
		req.Header.Set("Idempotency-Key", key)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Errorf("POST %s: %v", path, err)
		return answer{}
	}
	defer resp.Body.Close()
	raw, _ := io.ReadAll(resp.Body)
	var out struct {
		ID    string `json:"id"`
		Token string `json:"token"`
	}
	_ = json.Unmarshal(raw, &out)
	if out.Token != "" { // POST /v1/tokens: the secret, not the token's id
		out.ID = out.Token
	}
	if resp.StatusCode >= 300 {
		t.Errorf("POST %s (key %q) = %d %s", path, key, resp.StatusCode, raw)
	}
	return answer{status: resp.StatusCode, runID: out.ID, replayed: resp.Header.Get("Idempotency-Replayed") == "true"}
}

// run i of the stream: one analyte, 8 levels in duplicate, an invented
// photometer with a small deterministic noise.
func run(i int) map[string]any {
	var standards []map[string]any
	for k, x := range []float64{0.5, 1, 2, 5, 10, 20, 50, 100} {
		y := 0.012 + 0.0481*x
		e := 0.02 * math.Sin(float64(7*i+k))
		standards = append(standards, map[string]any{"analyte": "NO3-N", "level": fmt.Sprintf("L%d", k+1),
			"concentration": x, "responses": []float64{y * (1 + e), y * (1 - e/2)}})
	}
	return map[string]any{"method": "replica-nitrate", "instrument": "replica-photometer",
		"acquired_at": time.Date(2026, 3, 1, 8, 0, i, 0, time.UTC), "standards": standards}
}

// TestTwoReplicasIngestOneStreamWithRetries: an instrument's middleware
// posts a stream of runs through a load balancer to two replicas on one
// database, retrying with the same Idempotency-Key: every run sent to one
// replica, then to the other; a third of them to both at once; a quarter
// retried once more after they succeeded. Every key must map to exactly one
// run, every answer for a key must name that run, and the tables must hold
// each run exactly once: no duplicate, no loss.
func TestTwoReplicasIngestOneStreamWithRetries(t *testing.T) {
	url := dbtest.NewURL(t)
	ctx := context.Background()
	a, b := replica(t, url), replica(t, url)

	setup, err := store.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer setup.Close()
	_, admin, err := setup.CreateToken(ctx, "replica-admin", []string{lab.ScopeAdmin}, "test")
	if err != nil {
		t.Fatal(err)
	}
	post(t, a.URL, admin, "/v1/methods", "", map[string]any{"name": "replica-nitrate", "model": "linear",
		"weighting": "1/x^2", "analytes": []map[string]string{{"name": "NO3-N", "unit": "mg/L"}}})
	instrument := post(t, b.URL, admin, "/v1/tokens", "", map[string]any{"name": "replica-instrument", "scopes": []string{"runs:write"}, "instruments": []string{"replica-photometer"}}).runID
	if t.Failed() || instrument == "" {
		t.Fatal("set-up failed")
	}

	const runs = 36
	replicas := []string{a.URL, b.URL}
	var (
		mu      sync.Mutex
		answers = map[string][]answer{}
		wg      sync.WaitGroup
		slots   = make(chan struct{}, 8) // eight requests in flight at most
	)
	send := func(base string, i int) {
		defer wg.Done()
		slots <- struct{}{}
		defer func() { <-slots }()
		key := fmt.Sprintf("stream-%03d", i)
		got := post(t, base, instrument, "/v1/runs", key, run(i))
		mu.Lock()
		answers[key] = append(answers[key], got)
		mu.Unlock()
	}
	for i := 0; i < runs; i++ {
		first, second := replicas[i%2], replicas[(i+1)%2]
		if i%3 == 0 { // to both at once: the two replicas race for the key
			wg.Add(2)
			go send(first, i)
			go send(second, i)
			continue
		}
		wg.Add(1)
		go send(first, i)
	}
	wg.Wait()
	for i := 0; i < runs; i++ { // the retries: to the other replica, and a quarter once more to each
		if i%3 != 0 {
			wg.Add(1)
			go send(replicas[(i+1)%2], i)
		}
		if i%4 == 0 {
			wg.Add(2)
			go send(a.URL, i)
			go send(b.URL, i)
		}
	}
	wg.Wait()

	pool, err := pgxpool.New(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer pool.Close()
	keyRuns := map[string]string{}
	rows, err := pool.Query(ctx, `SELECT key, run_id::text FROM idempotency_keys`)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var k, id string
		if err := rows.Scan(&k, &id); err != nil {
			t.Fatal(err)
		}
		keyRuns[k] = id
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	if len(keyRuns) != runs {
		t.Errorf("idempotency keys stored = %d, want %d", len(keyRuns), runs)
	}
	for key, as := range answers {
		fresh := 0
		for _, got := range as {
			if got.runID != keyRuns[key] {
				t.Errorf("%s: an answer names run %s, the key maps to %s", key, got.runID, keyRuns[key])
			}
			if !got.replayed {
				fresh++
			}
		}
		if fresh != 1 {
			t.Errorf("%s: %d of %d answers created a run, want exactly 1 (the others replayed)", key, fresh, len(as))
		}
	}
	counts := []struct {
		table string
		want  int
	}{
		{"runs", runs},
		{"readings", runs * 16},
		{"curves", runs},
		{"audit WHERE action = 'run.create'", runs},
		{"(SELECT DISTINCT run_id FROM idempotency_keys JOIN runs ON runs.id = run_id) k", runs},
	}
	for _, c := range counts {
		t.Run(c.table, func(t *testing.T) {
			var got int
			if err := pool.QueryRow(ctx, `SELECT count(*) FROM `+c.table).Scan(&got); err != nil {
				t.Fatal(err)
			}
			if got != c.want {
				t.Errorf("count = %d, want %d", got, c.want)
			}
		})
	}
}
