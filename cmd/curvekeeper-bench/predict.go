package main

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"time"
)

const predictConns = 64

type predictionSample struct {
	ID        string    `json:"id"`
	Responses []float64 `json:"responses"`
}

type predictionRequest struct {
	Samples []predictionSample `json:"samples"`
}

// predictionBody is the request of the predict scenario: 10 unknowns in
// duplicate, spread over the calibrated range.
func predictionBody() ([]byte, error) {
	var req predictionRequest
	for i := 0; i < 10; i++ {
		y := 0.012 + 0.0481*(1+9.5*float64(i))
		req.Samples = append(req.Samples, predictionSample{ID: "bench-sample-" + strconv.Itoa(i+1),
			Responses: []float64{y * 0.995, y * 1.005}})
	}
	return json.Marshal(req)
}

// predict compares POST /v1/curves/{id}/predictions with 64 connections
// against a bare Echo server that decodes the same body and answers a small
// JSON, driven by the same load generator. It also reports the service's
// peak RSS under this load and under ingest, against the bare server's.
func (h *harness) predict(ctx context.Context) error {
	body, err := predictionBody()
	if err != nil {
		return err
	}
	exe, err := os.Executable()
	if err != nil {
		return err
	}
	bare, err := startProc(ctx, exe, []string{baselineCommand}, nil, filepath.Join(h.tmp, "baseline.log"), baselineLinePrefix, "")
	if err != nil {
		return fmt.Errorf("baseline server: %w", err)
	}
	defer bare.stop()
	path := "/v1/curves/" + h.curveID + "/predictions"
	svcClient, bareClient := newClient(predictConns), newClient(predictConns)
	// Warm both: connections, the curve cache, the runtime's heap.
	for i := 0; i < 200; i++ {
		if _, err := call(ctx, svcClient, http.MethodPost, h.svc.base+path, h.lims, body, http.StatusOK); err != nil {
			return err
		}
		if _, err := call(ctx, bareClient, http.MethodPost, bare.base+path, h.lims, body, http.StatusOK); err != nil {
			return err
		}
	}
	for _, pid := range []int{h.svc.pid(), bare.pid()} {
		if err := resetPeakRSS(pid); err != nil {
			return err
		}
	}
	var svc, base result
	stop := h.profile(ctx, "predict")
	for round := 0; round < h.cfg.Rounds; round++ {
		service := load{Workers: predictConns, Max: h.cfg.PredictMax, Duration: h.cfg.PhaseTime, ServerPID: h.svc.pid(),
			Do: func(ctx context.Context, _ int) error {
				_, err := call(ctx, svcClient, http.MethodPost, h.svc.base+path, h.lims, body, http.StatusOK)
				return err
			}}
		baseline := load{Workers: predictConns, Max: h.cfg.PredictMax, Duration: h.cfg.PhaseTime, ServerPID: bare.pid(),
			Do: func(ctx context.Context, _ int) error {
				_, err := call(ctx, bareClient, http.MethodPost, bare.base+path, h.lims, body, http.StatusOK)
				return err
			}}
		h.progress("predict round %d/%d", round+1, h.cfg.Rounds)
		alternate(ctx, round, &svc, service, &base, baseline)
	}
	stop()
	if err := loadErrors("predict", svc, base); err != nil {
		return err
	}
	// The closed loop measures latency at saturation, where it is mostly
	// queueing (p99 tracks 64 / throughput). The same 64 connections at a
	// fixed offered rate, half of what the service sustained above (both
	// sides get the same rate), show the latency a client sees at half load.
	offered := min(svc.rate(), base.rate()) / 2
	var svcPaced, basePaced result
	for round := 0; round < h.cfg.Rounds; round++ {
		max := int(offered * h.cfg.PhaseTime.Seconds())
		service := load{Workers: predictConns, Max: max, Duration: h.cfg.PhaseTime + time.Second, Rate: offered,
			Do: func(ctx context.Context, _ int) error {
				_, err := call(ctx, svcClient, http.MethodPost, h.svc.base+path, h.lims, body, http.StatusOK)
				return err
			}}
		baseline := load{Workers: predictConns, Max: max, Duration: h.cfg.PhaseTime + time.Second, Rate: offered,
			Do: func(ctx context.Context, _ int) error {
				_, err := call(ctx, bareClient, http.MethodPost, bare.base+path, h.lims, body, http.StatusOK)
				return err
			}}
		h.progress("predict at a fixed rate of %.0f req/s, round %d/%d", offered, round+1, h.cfg.Rounds)
		alternate(ctx, round, &svcPaced, service, &basePaced, baseline)
	}
	if err := loadErrors("predict at a fixed rate", svcPaced, basePaced); err != nil {
		return err
	}
	rssSvc, err := peakRSS(h.svc.pid())
	if err != nil {
		return err
	}
	rssBare, err := peakRSS(bare.pid())
	if err != nil {
		return err
	}
	l := line{Scenario: "predict", Service: svc.rate(), Baseline: base.rate(), Unit: "req/s",
		Target: target{"ratio", ">=", 0.5}}
	l.Extra = append(append(latencies("", svc), latencies("baseline_", base)...),
		kv("connections", predictConns), kv("body_bytes", len(body)), kv("requests", svc.N))
	l.Extra = append(append(l.Extra, cpuPerRequest("", svc)...), cpuPerRequest("baseline_", base)...)
	fmt.Fprintln(h.out, l)
	fmt.Fprintln(h.out, line{Scenario: "predict_p99", Service: svc.percentile(0.99), Baseline: base.percentile(0.99),
		Unit: "ms", Target: target{"service", "<=", 10}, Extra: []string{kv("connections", predictConns)}})
	fmt.Fprintln(h.out, line{Scenario: "predict_p99_paced", Service: svcPaced.percentile(0.99), Baseline: basePaced.percentile(0.99),
		Unit: "ms", Target: target{"service", "<=", 10}, Extra: []string{kv("connections", predictConns),
			kv("offered_rps", offered), kv("service_rps", svcPaced.rate()), kv("baseline_rps", basePaced.rate()),
			kv("p50_ms", svcPaced.percentile(0.5)), kv("baseline_p50_ms", basePaced.percentile(0.5))}})
	if h.rssIngest > 0 {
		fmt.Fprintln(h.out, line{Scenario: "rss_ingest", Service: h.rssIngest, Baseline: rssBare, Unit: "MB",
			Target: target{"service", "<=", 150}, Extra: []string{kv("baseline_is", "bare Echo under the predict load")}})
	}
	fmt.Fprintln(h.out, line{Scenario: "rss_predict", Service: rssSvc, Baseline: rssBare, Unit: "MB",
		Target: target{"service", "<=", 150}, Extra: []string{kv("baseline_is", "bare Echo under the predict load")}})
	return nil
}
