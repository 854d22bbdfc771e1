package main

import (
	"context"
	"encoding/binary"
	"fmt"
	"net/http"
	"net/url"
	"strconv"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
	"curvekeeper/store"
)

// The growth scenario: does the service stay as fast when the database
// holds years of readings? Two service processes run side by side on two
// databases of the same server, filled by the same COPY loader: a small one
// (growthSmallRuns runs) and a large one (cfg.GrowthReadings readings, 10
// million in the full run). Each run of the loader has 16 readings (8
// levels × 2 replicates), its curve (approved), one sample with its result
// and the result's change-feed event, spread over growthInstruments
// instruments every growthStep, ending before the bench runs' own times.
// The loads alternate between the two processes round by round, and each
// growth_* line gives the large database's median latency against the
// small one's, measured in the same run.
const (
	growthInstruments = 40
	growthStep        = 2 * time.Minute
	growthSmallRuns   = growthInstruments * 60 // 60 curves per instrument: history page 1 is full on both
	growthConns       = 4
	growthFeedPage    = 100
)

// growthEnd is when the loaded history ends: before runRequest's times, so
// the runs the ingest load posts are the newest on both databases.
var growthEnd = time.Date(2025, 12, 31, 0, 0, 0, 0, time.UTC)

// growthWindow is the trend window measured: the last two days of the
// loaded history, which hold the same curves on both databases.
const growthWindow = 48 * time.Hour

func (h *harness) growth(ctx context.Context) error {
	smallURL, err := h.extraDatabase(ctx, "growth_small")
	if err != nil {
		return err
	}
	bigURL, err := h.extraDatabase(ctx, "growth_large")
	if err != nil {
		return err
	}
	small, err := h.startInstance(ctx, smallURL, "growth-small.log")
	if small != nil && small.svc != nil {
		defer small.svc.stop()
	}
	if err != nil {
		return err
	}
	big, err := h.startInstance(ctx, bigURL, "growth-large.log")
	if big != nil && big.svc != nil {
		defer big.svc.stop()
	}
	if err != nil {
		return err
	}
	t0 := time.Now()
	if err := bulkLoadHistory(ctx, smallURL, growthSmallRuns); err != nil {
		return fmt.Errorf("load the small database: %w", err)
	}
	h.progress("small database: %d readings in %.1f s", 16*growthSmallRuns, time.Since(t0).Seconds())
	bigRuns := max(growthSmallRuns, h.cfg.GrowthReadings/16)
	t0 = time.Now()
	if err := bulkLoadHistory(ctx, bigURL, bigRuns); err != nil {
		return fmt.Errorf("load the large database: %w", err)
	}
	loadSecs := time.Since(t0).Seconds()
	h.progress("large database: %d readings in %.1f s (%.0f readings/s with their runs, curves, results and events)",
		16*bigRuns, loadSecs, float64(16*bigRuns)/loadSecs)

	sides := []*growthSide{{in: small, url: smallURL}, {in: big, url: bigURL}}
	for _, s := range sides {
		if err := s.prepare(ctx); err != nil {
			return err
		}
		defer s.db.Close()
	}
	cl := newClient(growthConns)
	get := func(s *growthSide, path string) func(context.Context, int) error {
		return func(ctx context.Context, _ int) error {
			_, err := call(ctx, cl, http.MethodGet, s.in.svc.base+path, s.in.lims, nil, http.StatusOK)
			return err
		}
	}
	trendQuery := "?" + url.Values{"instrument": {"bench-photometer-0"}, "analyte": {benchAnalyte},
		"from": {growthEnd.Add(-growthWindow).Format(time.RFC3339)}, "to": {growthEnd.Format(time.RFC3339)}}.Encode()
	historyQuery := "?" + url.Values{"instrument": {"bench-photometer-0"}, "analyte": {benchAnalyte}, "limit": {"50"}}.Encode()
	ops := []struct {
		name string
		what string
		do   func(s *growthSide, round int) func(context.Context, int) error
	}{
		{"growth_ingest", "POST /v1/runs", func(s *growthSide, round int) func(context.Context, int) error {
			return func(ctx context.Context, seq int) error {
				_, err := post(ctx, cl, s.in.svc.base+"/v1/runs", s.in.instrument, runRequest(1_000_000+round*100_000+seq), http.StatusCreated, nil)
				return err
			}
		}},
		{"growth_history", "GET /v1/curves page 1 of one instrument and analyte", func(s *growthSide, _ int) func(context.Context, int) error {
			return get(s, "/v1/curves"+historyQuery)
		}},
		{"growth_feed", "GET /v1/results at the tail", func(s *growthSide, _ int) func(context.Context, int) error {
			return get(s, "/v1/results?limit="+strconv.Itoa(growthFeedPage)+"&cursor="+s.tailCursor)
		}},
		{"growth_trend", "GET /v1/trends over two days", func(s *growthSide, _ int) func(context.Context, int) error {
			return get(s, "/v1/trends"+trendQuery)
		}},
		{"growth_trend_subjects", "store.TrendSubjects (the QA trend page's list)", func(s *growthSide, _ int) func(context.Context, int) error {
			return func(ctx context.Context, _ int) error {
				_, err := s.db.TrendSubjects(ctx)
				return err
			}
		}},
		// What TrendSubjects ran until it skipped through the index: shown
		// for the before and after in one run.
		{"growth_trend_subjects_groupby", "GROUP BY over every curve (TrendSubjects before)", func(s *growthSide, _ int) func(context.Context, int) error {
			return func(ctx context.Context, _ int) error {
				rows, err := s.db.Pool.Query(ctx, `SELECT instrument, analyte, count(*), max(acquired_at) FROM curves
GROUP BY instrument, analyte ORDER BY instrument, analyte LIMIT 500`)
				if err != nil {
					return err
				}
				rows.Close()
				return rows.Err()
			}
		}},
	}
	for _, op := range ops {
		var rs [2]result
		for round := 0; round < h.cfg.Rounds; round++ {
			h.progress("%s round %d/%d", op.name, round+1, h.cfg.Rounds)
			mk := func(s *growthSide) load {
				return load{Workers: growthConns, Max: h.cfg.GrowthRequests / h.cfg.Rounds, Duration: h.cfg.PhaseTime, Do: op.do(s, round)}
			}
			alternate(ctx, round, &rs[1], mk(sides[1]), &rs[0], mk(sides[0]))
		}
		if err := loadErrors(op.name, rs[0], rs[1]); err != nil {
			return err
		}
		l := line{Scenario: op.name, Service: rs[1].percentile(0.5), Baseline: rs[0].percentile(0.5), Unit: "ms",
			Target: target{"ratio", "<=", 1.5}}
		l.Extra = append(append([]string{kv("service_is", strconv.Itoa(16*bigRuns)+" readings"),
			kv("baseline_is", strconv.Itoa(16*growthSmallRuns)+" readings"), kv("request", op.what)},
			append(latencies("", rs[1]), latencies("baseline_", rs[0])...)...),
			kv("requests", rs[1].N), kv("baseline_requests", rs[0].N), kv("clients", growthConns))
		fmt.Fprintln(h.out, l)
	}
	return nil
}

// growthSide is one of the two databases with its service.
type growthSide struct {
	in         *instance
	url        string
	db         *store.DB
	tailCursor string // growthFeedPage events before the end of the feed
}

func (s *growthSide) prepare(ctx context.Context) error {
	db, err := store.Open(ctx, s.url)
	if err != nil {
		return err
	}
	s.db = db
	var last int64
	if err := db.Pool.QueryRow(ctx, `SELECT coalesce(max(seq), 0) FROM result_events`).Scan(&last); err != nil {
		return err
	}
	s.tailCursor = store.EncodeFeedCursor(max(0, last-growthFeedPage))
	return nil
}

// extraDatabase makes another database on the harness's server and returns
// its URL; it is dropped with the private cluster, or at the end.
func (h *harness) extraDatabase(ctx context.Context, prefix string) (string, error) {
	name := prefix + "_" + randomHex(4)
	conn, err := pgx.Connect(ctx, h.dbURL)
	if err != nil {
		return "", err
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, "CREATE DATABASE "+name); err != nil {
		return "", fmt.Errorf("create database %s: %w", name, err)
	}
	if h.cluster == nil { // a server the harness does not own: drop it after
		drop := h.dropDB
		base := h.dbURL
		h.dropDB = func() {
			if drop != nil {
				drop()
			}
			dctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
			defer cancel()
			if c, err := pgx.Connect(dctx, base); err == nil {
				_, _ = c.Exec(dctx, "DROP DATABASE IF EXISTS "+name+" WITH (FORCE)")
				c.Close(dctx)
			}
		}
	}
	return withDatabase(h.dbURL, name)
}

// bulkLoadHistory writes runs runs with COPY (see the growth scenario):
// their readings, curves, samples, results and feed events, oldest first,
// with the tables' indexes in place, as a database grows. Identity columns
// continue the service's own numbering. It vacuums and analyzes the tables
// afterwards, as autovacuum would after such a load.
func bulkLoadHistory(ctx context.Context, dbURL string, runs int) error {
	report, err := smallReport()
	if err != nil {
		return err
	}
	conn, err := pgx.Connect(ctx, dbURL)
	if err != nil {
		return err
	}
	defer conn.Close(context.WithoutCancel(ctx))
	// As a superuser (the private cluster), skip the per-row foreign-key
	// triggers: every row the loaded rows name is written just before.
	_, _ = conn.Exec(ctx, `SET session_replication_role = replica`)
	var base int64 // identity values after the service's own rows
	if err := conn.QueryRow(ctx, `SELECT greatest(
  (SELECT coalesce(max(id), 0) FROM run_samples), (SELECT coalesce(max(id), 0) FROM sample_results),
  (SELECT coalesce(max(seq), 0) FROM result_events))`).Scan(&base); err != nil {
		return err
	}
	runIDs, curveIDs := make([]uuid.UUID, runs), make([]uuid.UUID, runs)
	for i := range runs {
		if runIDs[i], err = uuid.NewV7(); err != nil {
			return err
		}
		if curveIDs[i], err = uuid.NewV7(); err != nil {
			return err
		}
	}
	at := func(i int) time.Time { return growthEnd.Add(-time.Duration(runs-1-i) * growthStep) }
	inst := func(i int) string { return "bench-photometer-" + strconv.Itoa(i%growthInstruments) }
	copyRows := func(table string, cols []string, n int, row func(i int) []any) error {
		_, err := conn.CopyFrom(ctx, pgx.Identifier{table}, cols, pgx.CopyFromSlice(n, func(i int) ([]any, error) { return row(i), nil }))
		if err != nil {
			return fmt.Errorf("copy %s: %w", table, err)
		}
		return nil
	}
	hash := make([]byte, 8)
	if err := copyRows("runs", []string{"id", "method", "method_revision", "instrument", "acquired_at", "received_by", "source_format", "request_hash", "payload"}, runs,
		func(i int) []any {
			binary.BigEndian.PutUint64(hash, uint64(i))
			return []any{runIDs[i], benchMethod, 1, inst(i), at(i), "bench-bulk-load", "json", hash, []byte(`{}`)}
		}); err != nil {
		return err
	}
	if err := copyRows("readings", []string{"run_id", "analyte", "level", "replicate", "standard", "concentration", "response"}, 16*runs,
		func(k int) []any {
			i, j := k/16, k%16
			x := benchLevels[j/2]
			return []any{runIDs[i], benchAnalyte, "L" + strconv.Itoa(j/2+1), j%2 + 1, j / 2, x, (0.012 + 0.0481*x) * (1 + 0.001*float64(j%3-1))}
		}); err != nil {
		return err
	}
	if err := copyRows("curves", []string{"id", "run_id", "method", "method_revision", "instrument", "analyte", "unit", "model", "weighting",
		"verdict", "status", "engine_version", "report", "acquired_at", "created_by", "reviewed_at", "reviewed_by",
		"slope", "intercept", "residual_sd", "r_squared", "failed_checks"}, runs,
		func(i int) []any {
			return []any{curveIDs[i], runIDs[i], benchMethod, 1, inst(i), benchAnalyte, "mg/L", "linear", "1/x^2",
				"pass", lab.StatusApproved, "bulk", report, at(i), "bench-bulk-load", at(i).Add(time.Hour), "bench-bulk-review",
				0.0481, 0.012, 0.01, 0.999, []string{}}
		}); err != nil {
		return err
	}
	sample := func(i int) string { return "GROW-" + strconv.Itoa(i) }
	if err := copyRows("run_samples", []string{"id", "run_id", "position", "sample_id", "analyte", "responses", "dilution", "acquired_at"}, runs,
		func(i int) []any {
			return []any{base + int64(i) + 1, runIDs[i], 0, sample(i), benchAnalyte, []float64{0.5, 0.51}, 1.0, at(i)}
		}); err != nil {
		return err
	}
	if err := copyRows("sample_results", []string{"id", "run_sample_id", "curve_id", "run_id", "sample_id", "analyte", "unit", "acquired_at",
		"responses", "dilution", "mean_response", "concentration", "standard_error", "interval_low", "interval_high", "interval_level",
		"interval_bounded", "interval_method", "flags", "release_state", "release_reason", "created_by"}, runs,
		func(i int) []any {
			id := base + int64(i) + 1
			return []any{id, id, curveIDs[i], runIDs[i], sample(i), benchAnalyte, "mg/L", at(i),
				[]float64{0.5, 0.51}, 1.0, 0.505, 10.25, 0.05, 10.1, 10.4, 0.95,
				true, "bulk", []string{}, "releasable", "bulk load: curve approved", "bench-bulk-load"}
		}); err != nil {
		return err
	}
	if err := copyRows("result_events", []string{"seq", "result_id", "kind", "cause", "release_state", "reason", "at"}, runs,
		func(i int) []any {
			id := base + int64(i) + 1
			return []any{id, id, lab.EventCreated, "run.create", "releasable", "bulk load", at(i)}
		}); err != nil {
		return err
	}
	for _, t := range [][2]string{{"run_samples", "id"}, {"sample_results", "id"}, {"result_events", "seq"}} {
		if _, err := conn.Exec(ctx, `SELECT setval(pg_get_serial_sequence('`+t[0]+`', '`+t[1]+`'), (SELECT max(`+t[1]+`) FROM `+t[0]+`))`); err != nil {
			return fmt.Errorf("move %s's numbering past the load: %w", t[0], err)
		}
	}
	if _, err := conn.Exec(ctx, `VACUUM (ANALYZE) runs, readings, curves, run_samples, sample_results, result_events`); err != nil {
		return fmt.Errorf("vacuum the loaded tables: %w", err)
	}
	return nil
}
