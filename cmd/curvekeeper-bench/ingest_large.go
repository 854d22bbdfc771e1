package main

import (
	"context"
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"net/http"
	"time"
)

// The large LC-MS/MS run: 100 analytes × 8 levels (2 replicates each) and
// 200 samples (2 per analyte), every reading with its internal standard's
// response, in one request.
const (
	largeMethod     = "bench-lcms-large"
	largeInstrument = "bench-lcms-1"
	largeAnalytes   = 100
	largeSamples    = 2 // per analyte
	largeConns      = 4
)

func largeAnalyte(a int) string { return fmt.Sprintf("A%03d", a) }

// largeMethodBody defines the method: every analyte against its own
// internal standard, a line weighted 1/x² on the response ratio.
func largeMethodBody() map[string]any {
	analytes := make([]map[string]any, largeAnalytes)
	for a := range analytes {
		analytes[a] = map[string]any{"name": largeAnalyte(a), "unit": "ng/mL",
			"quant": map[string]any{"internal_standard": largeAnalyte(a) + "-IS", "reporting_limit": 0.5}}
	}
	return map[string]any{"name": largeMethod, "model": "linear", "weighting": "1/x^2", "analytes": analytes}
}

type largeStandard struct {
	standard
	ISResponses []float64 `json:"is_responses"`
}

type largeSample struct {
	ID          string    `json:"id"`
	Analyte     string    `json:"analyte"`
	Responses   []float64 `json:"responses"`
	ISResponses []float64 `json:"is_responses"`
}

type largeRun struct {
	Method     string          `json:"method"`
	Instrument string          `json:"instrument"`
	AcquiredAt time.Time       `json:"acquired_at"`
	Standards  []largeStandard `json:"standards"`
	Samples    []largeSample   `json:"samples"`
}

// largeRunRequest is large run number i: the ratio of analyte a at x is
// (0.01 + 0.002·a)·x + 0.001 with 1 % relative noise, the IS responses
// 50,000 with 3 %, seeded by i so every load is the same.
func largeRunRequest(i int) largeRun {
	r := largeRun{Method: largeMethod, Instrument: largeInstrument,
		AcquiredAt: time.Date(2026, 1, 2, 0, 0, 0, 0, time.UTC).Add(time.Duration(i+1) * time.Second)}
	rng := rand.New(rand.NewPCG(uint64(i), 20261206))
	is := func() float64 { return 50000 * (1 + 0.03*rng.NormFloat64()) }
	for a := 0; a < largeAnalytes; a++ {
		slope := 0.01 + 0.002*float64(a)
		for k, x := range benchLevels {
			st := largeStandard{standard: standard{Analyte: largeAnalyte(a), Level: fmt.Sprintf("L%d", k+1), Concentration: x}}
			for rep := 0; rep < 2; rep++ {
				w := is()
				st.Responses = append(st.Responses, (slope*x+0.001)*(1+0.01*rng.NormFloat64())*w)
				st.ISResponses = append(st.ISResponses, w)
			}
			r.Standards = append(r.Standards, st)
		}
		for s := 0; s < largeSamples; s++ {
			w := is()
			x := benchLevels[1+(a+s)%6]
			r.Samples = append(r.Samples, largeSample{ID: fmt.Sprintf("S%d", s+1), Analyte: largeAnalyte(a),
				Responses: []float64{(slope*x + 0.001) * w}, ISResponses: []float64{w}})
		}
	}
	return r
}

// ingestLarge compares POST /v1/runs of the large run with 4 clients
// against 4 goroutines of a pgxpool storing the same run row and its 1,600
// readings (the ingest scenario's baseline), one transaction each.
func (h *harness) ingestLarge(ctx context.Context) error {
	cl := newClient(largeConns)
	if _, err := post(ctx, cl, h.svc.base+"/v1/methods", h.admin, largeMethodBody(), http.StatusCreated, nil); err != nil {
		return err
	}
	pool, err := h.baselineIngestPool(ctx)
	if err != nil {
		return err
	}
	defer pool.Close()
	bodies := make([][]byte, h.cfg.LargeMax)
	for i := range bodies {
		if bodies[i], err = json.Marshal(largeRunRequest(i)); err != nil {
			return err
		}
	}
	// One run first, outside the measurement: it must be accepted whole.
	var created struct {
		Curves []struct {
			Verdict string `json:"verdict"`
		} `json:"curves"`
	}
	if _, err := post(ctx, cl, h.svc.base+"/v1/runs", h.instrument, largeRunRequest(-1), http.StatusCreated, &created); err != nil {
		return err
	}
	if len(created.Curves) != largeAnalytes {
		return fmt.Errorf("the large run made %d curves, want %d", len(created.Curves), largeAnalytes)
	}
	url := h.svc.base + "/v1/runs"
	var svc, base result
	for round := 0; round < h.cfg.Rounds; round++ {
		service := load{Workers: largeConns, Max: h.cfg.LargeMax, Duration: h.cfg.PhaseTime, ServerPID: h.svc.pid(),
			Do: func(ctx context.Context, seq int) error {
				_, err := call(ctx, cl, http.MethodPost, url, h.instrument, bodies[seq], http.StatusCreated,
					"Idempotency-Key", fmt.Sprintf("large-%d-%d", round, seq))
				return err
			}}
		baseline := load{Workers: largeConns, Max: h.cfg.LargeMax, Duration: h.cfg.PhaseTime, ServerPID: -1,
			Do: func(ctx context.Context, seq int) error { return insertBaselineRun(ctx, pool, bodies[seq], seq) }}
		h.progress("ingest_large round %d/%d", round+1, h.cfg.Rounds)
		alternate(ctx, round, &svc, service, &base, baseline)
	}
	if err := loadErrors("ingest_large", svc, base); err != nil {
		return err
	}
	l := line{Scenario: "ingest_large", Service: svc.rate(), Baseline: base.rate(), Unit: "runs/s"}
	l.Extra = append(append(latencies("", svc), latencies("baseline_", base)...),
		kv("clients", largeConns), kv("analytes", largeAnalytes), kv("levels", len(benchLevels)),
		kv("readings_per_run", largeAnalytes*len(benchLevels)*2), kv("samples_per_run", largeAnalytes*largeSamples),
		kv("body_bytes", len(bodies[0])), kv("runs", svc.N), kv("baseline_runs", base.N),
		kv("baseline_is", "pgxpool storing the run row and its readings, one transaction per run"))
	l.Extra = append(append(l.Extra, cpuPerRequest("", svc)...), cpuPerRequest("baseline_", base)...)
	fmt.Fprintln(h.out, l)
	_, err = pool.Exec(ctx, `DROP SCHEMA bench_baseline CASCADE`)
	return err
}
