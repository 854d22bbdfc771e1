package main

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"net/url"
	"strconv"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"

	"curvekeeper/calib"
	"curvekeeper/lab"
	"curvekeeper/store"
)

const (
	historyInstrument = "hist-photometer-0"
	historyConns      = 4
	historyRuns       = 1000
)

// history bulk-loads curves with COPY, then compares the p99 latency of
// GET /v1/curves?instrument=&analyte=&limit=50 at a deep page (reached
// through the cursors) with page 1, and page 1 with the same query made
// through the store without HTTP.
func (h *harness) history(ctx context.Context) error {
	t0 := time.Now()
	if err := bulkLoadCurves(ctx, h.dbURL, h.cfg.HistoryCurves, h.cfg.HistoryPair); err != nil {
		return err
	}
	h.progress("bulk-loaded %d curves in %.1f s", h.cfg.HistoryCurves, time.Since(t0).Seconds())
	cl := newClient(historyConns)
	first := h.svc.base + "/v1/curves?" + url.Values{"instrument": {historyInstrument}, "analyte": {benchAnalyte}, "limit": {"50"}}.Encode()
	deep := first
	for page := 1; page < h.cfg.HistoryPage; page++ {
		var out struct {
			Curves     []json.RawMessage `json:"curves"`
			NextCursor string            `json:"next_cursor"`
		}
		b, err := call(ctx, cl, http.MethodGet, deep, h.lims, nil, http.StatusOK)
		if err != nil {
			return err
		}
		if err := json.Unmarshal(b, &out); err != nil {
			return err
		}
		if out.NextCursor == "" || len(out.Curves) != 50 {
			return fmt.Errorf("page %d has %d curves and cursor %q; want 50 and a cursor", page, len(out.Curves), out.NextCursor)
		}
		deep = first + "&cursor=" + url.QueryEscape(out.NextCursor)
	}
	h.progress("walked to page %d through the cursors", h.cfg.HistoryPage)
	db, err := store.Open(ctx, h.dbURL)
	if err != nil {
		return err
	}
	defer db.Close()
	get := func(u string) func(context.Context, int) error {
		return func(ctx context.Context, _ int) error {
			_, err := call(ctx, cl, http.MethodGet, u, h.lims, nil, http.StatusOK)
			return err
		}
	}
	direct := func(ctx context.Context, _ int) error {
		page, err := db.ListCurves(ctx, lab.CurveFilter{Instrument: historyInstrument, Analyte: benchAnalyte, Limit: 50})
		if err == nil && len(page.Curves) != 50 {
			err = fmt.Errorf("store page 1 has %d curves", len(page.Curves))
		}
		return err
	}
	mk := func(do func(context.Context, int) error) load {
		return load{Workers: historyConns, Max: h.cfg.HistorySamples / h.cfg.Rounds, Duration: 2 * h.cfg.PhaseTime, Do: do}
	}
	var p1, pDeep, pStore result
	for round := 0; round < h.cfg.Rounds; round++ {
		h.progress("history round %d/%d", round+1, h.cfg.Rounds)
		alternate(ctx, round, &pDeep, mk(get(deep)), &p1, mk(get(first)))
		pStore.add(mk(direct).run(ctx))
	}
	if err := loadErrors("history", p1, pDeep, pStore); err != nil {
		return err
	}
	l := line{Scenario: "history", Service: pDeep.percentile(0.99), Baseline: p1.percentile(0.99), Unit: "ms",
		Target: target{"ratio", "<=", 1.5}}
	l.Extra = append(append([]string{kv("service_is", "page "+strconv.Itoa(h.cfg.HistoryPage)), kv("baseline_is", "page 1")},
		append(latencies("", pDeep), latencies("baseline_", p1)...)...),
		kv("curves", h.cfg.HistoryCurves), kv("curves_in_pair", h.cfg.HistoryPair), kv("clients", historyConns), kv("requests", pDeep.N))
	fmt.Fprintln(h.out, l)
	l = line{Scenario: "history_page1", Service: p1.percentile(0.99), Baseline: pStore.percentile(0.99), Unit: "ms",
		Target: target{"service", "<=", 10}}
	l.Extra = append(append([]string{kv("baseline_is", "store.ListCurves in process")}, latencies("", p1)...), latencies("baseline_", pStore)...)
	fmt.Fprintln(h.out, l)
	return nil
}

// smallReport is the report stored with every bulk-loaded curve: the
// coefficients and verdict of a real fit of the bench run, nothing else, so
// that a million rows stay small (about 150 bytes each). It still decodes
// into a calib.Report; history never reads it.
func smallReport() ([]byte, error) {
	var pts []calib.Point
	for _, st := range runRequest(0).Standards {
		for _, y := range st.Responses {
			pts = append(pts, calib.Point{Level: st.Level, X: st.Concentration, Y: y})
		}
	}
	rep, err := calib.Fit(pts, calib.Options{Model: calib.Linear, Weighting: calib.WeightInvX2})
	if err != nil {
		return nil, err
	}
	return json.Marshal(calib.Report{Model: rep.Model, Weighting: rep.Weighting, WeightingRequested: rep.WeightingRequested,
		Coefficients: rep.Coefficients, ResidualSD: rep.ResidualSD, DF: rep.DF, RSquared: rep.RSquared, N: rep.N,
		Levels: rep.Levels, Confidence: rep.Confidence, Range: rep.Range, Verdict: rep.Verdict, Engine: rep.Engine})
}

// bulkLoadCurves writes n curves with COPY straight into the curves table
// (and historyRuns runs for their foreign keys), oldest first. pair of them
// belong to historyInstrument and the bench analyte, spread evenly over
// time; the rest to 200 other instrument and analyte pairs. It vacuums and
// analyzes both tables afterwards, as autovacuum would after such a load:
// the history is then read as a long-lived database holds it, and no
// autovacuum of the million rows competes with the scenarios that follow.
func bulkLoadCurves(ctx context.Context, dbURL string, n, pair int) error {
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
	// triggers during the load: every run and method the rows name exists,
	// written just before. Elsewhere the load checks them, only slower.
	_, _ = conn.Exec(ctx, `SET session_replication_role = replica`)
	_, _ = conn.Exec(ctx, `SET maintenance_work_mem = '256MB'`) // for the index rebuilds
	start := time.Date(2016, 1, 1, 0, 0, 0, 0, time.UTC)
	runIDs := make([]uuid.UUID, historyRuns)
	for i := range runIDs {
		if runIDs[i], err = uuid.NewV7(); err != nil {
			return err
		}
	}
	_, err = conn.CopyFrom(ctx, pgx.Identifier{"runs"},
		[]string{"id", "method", "method_revision", "instrument", "acquired_at", "received_by", "source_format", "request_hash", "payload"},
		pgx.CopyFromSlice(historyRuns, func(i int) ([]any, error) {
			return []any{runIDs[i], benchMethod, 1, historyInstrument, start, "bench-bulk-load", "json", []byte{byte(i), byte(i >> 8)}, []byte(`{}`)}, nil
		}))
	if err != nil {
		return fmt.Errorf("copy runs: %w", err)
	}
	// Drop the secondary indexes for the load and build them again after,
	// from their own definitions: one sort per index instead of a million
	// index insertions each.
	rows, err := conn.Query(ctx, `SELECT indexname, indexdef FROM pg_indexes
WHERE schemaname = current_schema() AND tablename = 'curves' AND indexname <> 'curves_pkey'`)
	if err != nil {
		return err
	}
	var names, defs []string
	for rows.Next() {
		var name, def string
		if err := rows.Scan(&name, &def); err != nil {
			return err
		}
		names, defs = append(names, name), append(defs, def)
	}
	if err := rows.Err(); err != nil {
		return err
	}
	for _, name := range names {
		if _, err := conn.Exec(ctx, `DROP INDEX `+pgx.Identifier{name}.Sanitize()); err != nil {
			return fmt.Errorf("drop index %s for the load: %w", name, err)
		}
	}
	every := max(1, n/pair)
	inPair := 0
	analytes := []string{benchAnalyte, "Pb", "As", "Cd", "Zn"}
	slope, intercept, sd, r2 := 0.0481, 0.012, 0.01, 0.999
	_, err = conn.CopyFrom(ctx, pgx.Identifier{"curves"},
		[]string{"id", "run_id", "method", "method_revision", "instrument", "analyte", "unit", "model", "weighting",
			"verdict", "engine_version", "report", "acquired_at", "created_by", "slope", "intercept", "residual_sd",
			"r_squared", "failed_checks"},
		pgx.CopyFromSlice(n, func(i int) ([]any, error) {
			id, err := uuid.NewV7()
			if err != nil {
				return nil, err
			}
			inst, analyte := historyInstrument, benchAnalyte
			if i%every != 0 || inPair >= pair {
				k := i % 200
				inst, analyte = "hist-photometer-"+strconv.Itoa(1+k/5), analytes[k%5]
			} else {
				inPair++
			}
			return []any{id, runIDs[i%historyRuns], benchMethod, 1, inst, analyte, "mg/L", "linear", "1/x^2",
				"pass", calib.EngineVersion, report, start.Add(time.Duration(i) * time.Minute), "bench-bulk-load",
				slope, intercept, sd, r2, []string{}}, nil
		}))
	if err != nil {
		return fmt.Errorf("copy curves: %w", err)
	}
	for i, def := range defs {
		if _, err := conn.Exec(ctx, def); err != nil {
			return fmt.Errorf("rebuild index %s: %w", names[i], err)
		}
	}
	if inPair < pair {
		return fmt.Errorf("only %d of %d curves landed in the queried pair", inPair, pair)
	}
	if _, err := conn.Exec(ctx, `VACUUM (ANALYZE) curves, runs`); err != nil {
		return fmt.Errorf("vacuum the loaded tables: %w", err)
	}
	return nil
}
