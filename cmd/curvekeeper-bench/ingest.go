package main

import (
	"context"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"
)

const (
	benchMethod  = "bench-linear"
	benchAnalyte = "NO3-N"
	ingestConns  = 16
)

// benchLevels are the nominal concentrations of the bench run's 8 levels.
var benchLevels = []float64{0.5, 1, 2, 5, 10, 20, 50, 100}

type standard struct {
	Analyte       string    `json:"analyte"`
	Level         string    `json:"level"`
	Concentration float64   `json:"concentration"`
	Responses     []float64 `json:"responses"`
}

type runReq struct {
	Method     string     `json:"method"`
	Instrument string     `json:"instrument"`
	AcquiredAt time.Time  `json:"acquired_at"`
	Standards  []standard `json:"standards"`
}

// runRequest is run number i: one analyte, 8 levels × 2 replicates of an
// invented photometer, y = (0.012 + 0.0481·x)(1 + e) with a deterministic
// relative noise e of at most ±2.5 % that differs from run to run.
func runRequest(i int) runReq {
	r := runReq{Method: benchMethod, Instrument: "bench-photometer-" + strconv.Itoa((i+8)%8),
		AcquiredAt: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC).Add(time.Duration(i+1) * time.Second)}
	// Relative noise of 1 % (SD), seeded by the run's number so every load is
	// the same: independent normal draws, so the level means carry no pattern
	// a curvature test could mistake for a bend.
	rng := rand.New(rand.NewPCG(uint64(i), 20261204))
	for k, x := range benchLevels {
		st := standard{Analyte: benchAnalyte, Level: "L" + strconv.Itoa(k+1), Concentration: x}
		for rep := 0; rep < 2; rep++ {
			e := 0.01 * rng.NormFloat64()
			st.Responses = append(st.Responses, (0.012+0.0481*x)*(1+e))
		}
		r.Standards = append(r.Standards, st)
	}
	return r
}

// benchInstruments are the instruments runRequest posts for.
func benchInstruments() []string {
	out := make([]string, 8)
	for i := range out {
		out[i] = "bench-photometer-" + strconv.Itoa(i)
	}
	return out
}

// ingest compares POST /v1/runs with 16 clients against 16 goroutines of a
// pgxpool inserting the same run and readings into tables of the same shape,
// one transaction each.
func (h *harness) ingest(ctx context.Context) error {
	pool, err := h.baselineIngestPool(ctx)
	if err != nil {
		return err
	}
	defer pool.Close()
	bodies := make([][]byte, h.cfg.IngestMax)
	for i := range bodies {
		if bodies[i], err = json.Marshal(runRequest(i)); err != nil {
			return err
		}
	}
	tokenID, err := h.sameRowsTables(ctx, pool)
	if err != nil {
		return err
	}
	cl := newClient(ingestConns)
	url := h.svc.base + "/v1/runs"
	var svc, base, same result
	if err := resetPeakRSS(h.svc.pid()); err != nil {
		return err
	}
	writes0, err := runWriteCounts(ctx, h.svc.base)
	if err != nil {
		return err
	}
	stop := h.profile(ctx, "ingest")
	for round := 0; round < h.cfg.Rounds; round++ {
		service := load{Workers: ingestConns, Max: h.cfg.IngestMax, Duration: h.cfg.PhaseTime, ServerPID: h.svc.pid(),
			Do: func(ctx context.Context, seq int) error {
				key := fmt.Sprintf("bench-%d-%d", round, seq)
				_, err := call(ctx, cl, http.MethodPost, url, h.instrument, bodies[seq], http.StatusCreated, "Idempotency-Key", key)
				return err
			}}
		baseline := load{Workers: ingestConns, Max: h.cfg.IngestMax, Duration: h.cfg.PhaseTime, ServerPID: -1,
			Do: func(ctx context.Context, seq int) error { return insertBaselineRun(ctx, pool, bodies[seq], seq) }}
		sameRows := load{Workers: ingestConns, Max: h.cfg.IngestMax, Duration: h.cfg.PhaseTime, ServerPID: -1,
			Do: func(ctx context.Context, seq int) error {
				return insertSameRows(ctx, pool, tokenID, bodies[seq], fmt.Sprintf("rows-%d-%d", round, seq))
			}}
		h.progress("ingest round %d/%d", round+1, h.cfg.Rounds)
		rotate(ctx, round, []load{service, baseline, sameRows}, []*result{&svc, &base, &same})
	}
	stop()
	writes1, err := runWriteCounts(ctx, h.svc.base)
	if err != nil {
		return err
	}
	if h.rssIngest, err = peakRSS(h.svc.pid()); err != nil {
		return err
	}
	if err := loadErrors("ingest", svc, base, same); err != nil {
		return err
	}
	l := line{Scenario: "ingest", Service: svc.rate(), Baseline: base.rate(), Unit: "runs/s",
		Target: target{"ratio", ">=", 0.5}}
	l.Extra = append(append(latencies("", svc), latencies("baseline_", base)...),
		kv("clients", ingestConns), kv("runs", svc.N), kv("baseline_runs", base.N))
	// How the service wrote its runs: in groups of how many on average, and
	// how many alone after a failed group (none in this load).
	if groups := writes1.groups - writes0.groups; groups > 0 {
		l.Extra = append(l.Extra, kv("write_group_runs", float64(writes1.grouped-writes0.grouped)/float64(groups)))
	}
	l.Extra = append(l.Extra, kv("writes_alone", writes1.alone-writes0.alone))
	l.Extra = append(append(l.Extra, cpuPerRequest("", svc)...), cpuPerRequest("baseline_", base)...)
	fmt.Fprintln(h.out, l)
	rows := line{Scenario: "ingest_same_rows", Service: svc.rate(), Baseline: same.rate(), Unit: "runs/s",
		Extra: []string{kv("baseline_is", "pgxpool writing every row the service writes, one transaction per run")}}
	rows.Extra = append(append(rows.Extra, latencies("baseline_", same)...), kv("baseline_runs", same.N))
	rows.Extra = append(rows.Extra, cpuPerRequest("baseline_", same)...)
	fmt.Fprintln(h.out, rows)
	return settle(ctx, pool)
}

// settle drops the baseline tables and vacuums the tables the service's
// runs went to, so that the autovacuum of some 50,000 new runs does not
// run during the scenarios that follow and weigh on their figures.
func settle(ctx context.Context, pool *pgxpool.Pool) error {
	if _, err := pool.Exec(ctx, `DROP SCHEMA bench_baseline CASCADE`); err != nil {
		return fmt.Errorf("drop the baseline tables: %w", err)
	}
	if _, err := pool.Exec(ctx, `VACUUM (ANALYZE) runs, readings, curves, audit, idempotency_keys`); err != nil {
		return fmt.Errorf("vacuum after ingest: %w", err)
	}
	return nil
}

// rotate runs one round of every load, starting with load round mod n, so
// that a drift of the machine's load during the run weighs on all alike.
func rotate(ctx context.Context, round int, loads []load, into []*result) {
	for i := range loads {
		k := (round + i) % len(loads)
		into[k].add(loads[k].run(ctx))
	}
}

// alternate runs one round of both loads, the service first in even rounds
// and the baseline first in odd ones.
func alternate(ctx context.Context, round int, svc *result, service load, base *result, baseline load) {
	rotate(ctx, round, []load{service, baseline}, []*result{svc, base})
}

// loadErrors refuses a measurement in which requests failed.
func loadErrors(scenario string, rs ...result) error {
	for _, r := range rs {
		if r.Errors > 0 {
			return fmt.Errorf("%s: %d requests failed, the first with: %v", scenario, r.Errors, r.FirstErr)
		}
		if r.N == 0 {
			return fmt.Errorf("%s: no request completed", scenario)
		}
	}
	return nil
}

// The baseline tables live in a scratch schema, copied from the service's
// runs and readings with their columns, defaults, checks, indexes and
// foreign keys, so that the baseline writes rows of the same shape.
const baselineSchema = `
CREATE SCHEMA bench_baseline;
CREATE TABLE bench_baseline.runs (LIKE public.runs INCLUDING ALL);
ALTER TABLE bench_baseline.runs ADD FOREIGN KEY (method, method_revision) REFERENCES public.methods (name, revision);
CREATE TABLE bench_baseline.readings (LIKE public.readings INCLUDING ALL);
ALTER TABLE bench_baseline.readings ADD FOREIGN KEY (run_id) REFERENCES bench_baseline.runs (id);`

const (
	baselineInsertRun = `
INSERT INTO bench_baseline.runs (id, method, method_revision, instrument, acquired_at, operator, received_by, source_format, request_hash, payload)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10)`
	baselineInsertReadings = `
INSERT INTO bench_baseline.readings (run_id, analyte, level, replicate, standard, concentration, response)
SELECT $1, * FROM unnest($2::text[], $3::text[], $4::int[], $5::int[], $6::float8[], $7::float8[])`
)

func (h *harness) baselineIngestPool(ctx context.Context) (*pgxpool.Pool, error) {
	pc, err := pgxpool.ParseConfig(h.dbURL)
	if err != nil {
		return nil, err
	}
	pc.MaxConns = ingestConns
	pool, err := pgxpool.NewWithConfig(ctx, pc)
	if err != nil {
		return nil, err
	}
	if _, err := pool.Exec(ctx, baselineSchema); err != nil {
		pool.Close()
		return nil, fmt.Errorf("create the baseline tables: %w", err)
	}
	return pool, nil
}

// insertBaselineRun decodes the run's JSON (as the service must) and stores
// the run row and its 16 readings in one transaction, sent as one batch.
func insertBaselineRun(ctx context.Context, pool *pgxpool.Pool, body []byte, seq int) error {
	var r runReq
	if err := json.Unmarshal(body, &r); err != nil {
		return err
	}
	id, err := newUUIDv7()
	if err != nil {
		return err
	}
	hash := sha256.Sum256(body)
	var (
		analytes, levels     []string
		replicates, position []int32
		concs, responses     []float64
	)
	for i, s := range r.Standards {
		for k, y := range s.Responses {
			analytes, levels = append(analytes, s.Analyte), append(levels, s.Level)
			replicates, position = append(replicates, int32(k+1)), append(position, int32(i))
			concs, responses = append(concs, s.Concentration), append(responses, y)
		}
	}
	return pgx.BeginFunc(ctx, pool, func(tx pgx.Tx) error {
		b := &pgx.Batch{}
		b.Queue(baselineInsertRun, id, r.Method, 1, r.Instrument, r.AcquiredAt, nil, "token:bench", "json", hash[:], body)
		b.Queue(baselineInsertReadings, id, analytes, levels, replicates, position, concs, responses)
		return tx.SendBatch(ctx, b).Close()
	})
}

func newUUIDv7() (uuid.UUID, error) { return uuid.NewV7() }

// writeCounts are the service's run-write counters (lab.RunWriteStats).
type writeCounts struct{ groups, grouped, alone float64 }

// runWriteCounts reads the run-write counters from the service's /metrics.
func runWriteCounts(ctx context.Context, base string) (writeCounts, error) {
	body, err := call(ctx, newClient(1), http.MethodGet, base+"/metrics", "", nil, http.StatusOK)
	if err != nil {
		return writeCounts{}, fmt.Errorf("read /metrics: %w", err)
	}
	var c writeCounts
	found := 0
	for _, line := range strings.Split(string(body), "\n") {
		name, value, ok := strings.Cut(line, " ")
		if !ok {
			continue
		}
		var into *float64
		switch name {
		case "curvekeeper_run_write_groups_total":
			into = &c.groups
		case "curvekeeper_run_writes_grouped_total":
			into = &c.grouped
		case "curvekeeper_run_writes_alone_total":
			into = &c.alone
		default:
			continue
		}
		if *into, err = strconv.ParseFloat(value, 64); err != nil {
			return writeCounts{}, fmt.Errorf("/metrics: %s: %w", name, err)
		}
		found++
	}
	if found != 3 {
		return writeCounts{}, fmt.Errorf("/metrics: %d of the 3 run-write counters found", found)
	}
	return c, nil
}
