package main

import (
	"context"
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"curvekeeper/calib"
	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

// TestLoadIsBoundedAndCounts: the load generator stops at Max requests,
// counts failures apart from successes and keeps one latency per success.
func TestLoadIsBoundedAndCounts(t *testing.T) {
	var hits atomic.Int64
	ts := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if hits.Add(1)%5 == 0 {
			http.Error(w, "no", http.StatusTeapot)
			return
		}
		w.Write([]byte(`{}`))
	}))
	defer ts.Close()
	cl := newClient(4)
	got := load{Workers: 4, Max: 50, Duration: 30 * time.Second, Do: func(ctx context.Context, _ int) error {
		_, err := call(ctx, cl, http.MethodGet, ts.URL, "", nil, http.StatusOK)
		return err
	}}.run(context.Background())
	if got.N+got.Errors != 50 || hits.Load() != 50 {
		t.Errorf("successes %d + failures %d, server saw %d; want 50 requests in all", got.N, got.Errors, hits.Load())
	}
	if got.Errors != 10 || len(got.Lat) != got.N {
		t.Errorf("failures = %d (want 10), latencies = %d (want %d)", got.Errors, len(got.Lat), got.N)
	}
	if got.FirstErr == nil || !strings.Contains(got.FirstErr.Error(), "418") {
		t.Errorf("first error = %v, want the 418", got.FirstErr)
	}
}

func TestPercentileNearestRank(t *testing.T) {
	var r result
	for i := 1; i <= 100; i++ {
		r.Lat = append(r.Lat, time.Duration(i)*time.Millisecond)
	}
	tests := []struct {
		q    float64
		want float64
	}{{0.5, 50}, {0.9, 90}, {0.99, 99}, {1, 100}, {0.001, 1}}
	for _, tc := range tests {
		if got := r.percentile(tc.q); got != tc.want {
			t.Errorf("percentile(%g) = %g, want %g", tc.q, got, tc.want)
		}
	}
}

func TestLineFormat(t *testing.T) {
	tests := []struct {
		name string
		l    line
		want string
	}{
		{"ratio target met", line{Scenario: "ingest", Service: 300, Baseline: 400, Unit: "runs/s", Target: target{"ratio", ">=", 0.5}},
			"scenario=ingest service=300.0 baseline=400.0 ratio=0.7500 target=ratio>=0.5 unit=runs/s met=yes"},
		{"absolute target missed", line{Scenario: "predict_p99", Service: 12.5, Baseline: 3, Unit: "ms", Target: target{"service", "<=", 10},
			Extra: []string{kv("note", "a b")}},
			`scenario=predict_p99 service=12.50 baseline=3.000 ratio=4.167 target=service<=10 unit=ms met=no note="a b"`},
		{"no baseline", line{Scenario: "x", Service: 1, Unit: "ms", Target: target{"ratio", "<=", 1.5}},
			"scenario=x service=1.000 baseline=0 ratio=NaN target=ratio<=1.5 unit=ms met=no"},
		{"no target", line{Scenario: "ingest_same_rows", Service: 1200, Baseline: 1500, Unit: "runs/s"},
			"scenario=ingest_same_rows service=1200 baseline=1500 ratio=0.8000 target=none unit=runs/s met=n/a"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := tc.l.String(); got != tc.want {
				t.Errorf("got  %s\nwant %s", got, tc.want)
			}
		})
	}
}

// benchDB returns a fresh migrated database, its URL, and a store on it
// that holds the bench method as the harness creates it.
func benchDB(t *testing.T) (string, *store.DB) {
	t.Helper()
	url := dbtest.NewURL(t)
	ctx := context.Background()
	db, err := store.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(db.Close)
	_, _, err = db.CreateMethod(ctx, lab.MethodInput{Name: benchMethod, Model: calib.Linear, Weighting: calib.WeightInvX2,
		Confidence: 0.95, Analytes: []lab.Analyte{{Name: benchAnalyte, Unit: "mg/L"}}, Acceptance: calib.DefaultPolicy()}, "test")
	if err != nil {
		t.Fatal(err)
	}
	return url, db
}

// TestBulkLoadServesHistory: the bulk load writes curves the store lists
// through the cursor and whose report decodes, with tiny counts.
func TestBulkLoadServesHistory(t *testing.T) {
	url, db := benchDB(t)
	ctx := context.Background()
	if err := bulkLoadCurves(ctx, url, 400, 120); err != nil {
		t.Fatal(err)
	}
	f := lab.CurveFilter{Instrument: historyInstrument, Analyte: benchAnalyte, Limit: 50}
	seen := 0
	var first string
	for page := 0; page < 5; page++ {
		p, err := db.ListCurves(ctx, f)
		if err != nil {
			t.Fatal(err)
		}
		if page == 0 {
			first = p.Curves[0].ID
		}
		seen += len(p.Curves)
		if p.NextCursor == "" {
			break
		}
		f.Cursor = p.NextCursor
	}
	if seen != 120 {
		t.Errorf("curves listed in the pair = %d, want 120", seen)
	}
	c, err := db.GetCurve(ctx, first)
	if err != nil {
		t.Fatal(err)
	}
	if len(c.Report.Coefficients) != 2 || c.Report.Verdict != "pass" {
		t.Errorf("report = %+v, want a passing linear fit", c.Report)
	}
	if _, err := json.Marshal(runRequest(3)); err != nil {
		t.Fatal(err)
	}
}

// TestSameRowsBaselineWritesTheRecord: one run of the same-rows baseline
// leaves the rows the service keeps for such a run, in the copies of its
// tables, with a report that is the engine's fit of the run.
func TestSameRowsBaselineWritesTheRecord(t *testing.T) {
	url, db := benchDB(t)
	ctx := context.Background()
	if _, _, err := db.CreateToken(ctx, "bench-instrument", []string{"runs:write"}, "test"); err != nil {
		t.Fatal(err)
	}
	h := &harness{dbURL: url}
	pool, err := h.baselineIngestPool(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer pool.Close()
	tokenID, err := h.sameRowsTables(ctx, pool)
	if err != nil {
		t.Fatal(err)
	}
	body, err := json.Marshal(runRequest(5))
	if err != nil {
		t.Fatal(err)
	}
	if err := insertSameRows(ctx, pool, tokenID, body, "rows-0-5"); err != nil {
		t.Fatal(err)
	}
	for table, want := range map[string]int{"idempotency_keys": 1, "runs": 1, "readings": 16, "curves": 1, "audit": 2} {
		var n int
		if err := pool.QueryRow(ctx, "SELECT count(*) FROM bench_baseline."+table).Scan(&n); err != nil {
			t.Fatal(err)
		}
		if n != want {
			t.Errorf("bench_baseline.%s holds %d rows, want %d", table, n, want)
		}
	}
	var stored []byte
	if err := pool.QueryRow(ctx, "SELECT report::text FROM bench_baseline.curves").Scan(&stored); err != nil {
		t.Fatal(err)
	}
	var pts []calib.Point
	for _, s := range runRequest(5).Standards {
		for _, y := range s.Responses {
			pts = append(pts, calib.Point{Level: s.Level, X: s.Concentration, Y: y})
		}
	}
	rep, err := calib.Fit(pts, benchFitOptions)
	if err != nil {
		t.Fatal(err)
	}
	want, err := json.Marshal(rep)
	if err != nil {
		t.Fatal(err)
	}
	if string(stored) != string(want) {
		t.Errorf("stored report differs from the engine's fit of the run (%d vs %d bytes)", len(stored), len(want))
	}
}

// TestBulkLoadHistoryIsReadable: the growth scenario's loader writes runs
// whose readings, curves, results and feed events the store reads back, and
// leaves the identity columns' numbering past the loaded rows, so the
// service's own writes that follow do not collide with them.
func TestBulkLoadHistoryIsReadable(t *testing.T) {
	url, db := benchDB(t)
	ctx := context.Background()
	const runs = 2 * growthInstruments
	if err := bulkLoadHistory(ctx, url, runs); err != nil {
		t.Fatal(err)
	}
	var readings int
	if err := db.Pool.QueryRow(ctx, `SELECT count(*) FROM readings`).Scan(&readings); err != nil {
		t.Fatal(err)
	}
	if readings != 16*runs {
		t.Errorf("readings = %d, want %d", readings, 16*runs)
	}
	feed, err := db.ResultFeed(ctx, "", 1000)
	if err != nil {
		t.Fatal(err)
	}
	if len(feed.Events) != runs || feed.More {
		t.Fatalf("feed has %d events (more %v), want %d", len(feed.Events), feed.More, runs)
	}
	res, err := db.SampleResults(ctx, "GROW-3")
	if err != nil || len(res) != 1 || res[0].RunID != feed.Events[3].RunID {
		t.Errorf("results of GROW-3 = %+v, %v; want the fourth run's one result", res, err)
	}
	curves, _, err := db.TrendSeries(ctx, lab.TrendFilter{Instrument: "bench-photometer-0", Analyte: benchAnalyte,
		From: growthEnd.Add(-growthWindow), To: growthEnd.Add(time.Second)})
	if err != nil || len(curves) != 2 || curves[0].Status != lab.StatusApproved {
		t.Errorf("trend of bench-photometer-0 = %d curves, %v; want its 2 approved curves", len(curves), err)
	}
	for _, tc := range [][2]string{{"run_samples", "id"}, {"sample_results", "id"}, {"result_events", "seq"}} {
		var next, maxID int64
		if err := db.Pool.QueryRow(ctx, `SELECT nextval(pg_get_serial_sequence('`+tc[0]+`', '`+tc[1]+`')), (SELECT max(`+tc[1]+`) FROM `+tc[0]+`)`).Scan(&next, &maxID); err != nil {
			t.Fatal(err)
		}
		if next != maxID+1 {
			t.Errorf("%s: the next %s is %d, want %d", tc[0], tc[1], next, maxID+1)
		}
	}
}
