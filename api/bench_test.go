package api_test

import (
	"bytes"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"curvekeeper/api"
	"curvekeeper/cmd/curvekeeper-bench/procstat"
	"curvekeeper/lab"
	"curvekeeper/store/dbtest"
)

// BenchmarkPredictRoute is one POST /v1/curves/{id}/predictions of 10
// samples in duplicate (the body of the harness's predict scenario) through
// the whole middleware chain and handler, in process (no sockets), 64 at a time, with the
// token and curve-status lookup against the real database. It shows the
// service's own CPU and allocations per request, which the harness's
// predict ratio depends on:
//
//	go test ./api -run '^$' -bench PredictRoute -benchmem -cpuprofile /tmp/predict.pprof
func BenchmarkPredictRoute(b *testing.B) {
	e, h := newBenchServer(b)
	run := e.nitrateCurve(b)
	_, lims := e.token(b, "lims-bench", "results:read")
	body := benchPredictionBody()
	path := "/v1/curves/" + run.Curves[0].ID.String() + "/predictions"
	b.ReportAllocs()
	b.SetParallelism(32) // 64 requests in flight on 2 cores, as the harness's 64 connections
	cpu0 := processCPU()
	b.RunParallel(func(pb *testing.PB) {
		for pb.Next() {
			req := httptest.NewRequest(http.MethodPost, path, bytes.NewReader(body))
			req.Header.Set("Authorization", "Bearer "+lims)
			req.Header.Set("Content-Type", "application/json")
			w := httptest.NewRecorder()
			h.ServeHTTP(w, req)
			if w.Code != http.StatusOK {
				b.Fatalf("status %d: %s", w.Code, w.Body.String())
			}
		}
	})
	// CPU time of this process per request (user + system): less disturbed
	// by other work on a shared machine than ns/op, and what bounds the
	// service's throughput when the cores are saturated.
	b.ReportMetric(float64(processCPU()-cpu0)/float64(b.N), "cpu-ns/op")
}

// newBenchServer starts a service (no rate limit, the test clock, a
// discarded log) on a fresh database with the bootstrap admin token, and
// returns its env and its handler, which the benchmarks call in process.
func newBenchServer(b *testing.B) (*env, http.Handler) {
	db := dbtest.NewDB(b)
	s, err := api.New(api.Config{RateLimit: -1}, lab.NewService(db, testClock), slog.New(slog.NewJSONHandler(io.Discard, nil)))
	if err != nil {
		b.Fatal(err)
	}
	h := s.Handler()
	e := &env{db: db, srv: httptest.NewServer(h), admin: bootstrapSecret}
	b.Cleanup(e.srv.Close)
	if _, _, err := db.EnsureToken(b.Context(), "bootstrap-admin", bootstrapSecret, []string{"admin"}); err != nil {
		b.Fatal(err)
	}
	return e, h
}

// benchPredictionBody is the body of the harness's predict scenario: 10
// nitrate samples in duplicate spread over the standards' range.
func benchPredictionBody() []byte {
	var body bytes.Buffer
	body.WriteString(`{"samples":[`)
	for i := range 10 {
		y := 0.012 + 0.0481*(1+9.5*float64(i))
		if i > 0 {
			body.WriteByte(',')
		}
		fmt.Fprintf(&body, `{"id":"bench-sample-%d","responses":[%v,%v]}`, i+1, y*0.995, y*1.005)
	}
	body.WriteString(`]}`)
	return body.Bytes()
}

// benchPredictSender returns a function that posts body to curve's
// prediction route through h with token, writing the answer into one
// reused buffer (so that copying large answers is not counted as the
// route's work), and fails b on any status but 200; the buffer holds the
// last answer.
func benchPredictSender(b *testing.B, h http.Handler, token string, body []byte) (send func(curve string), last *bytes.Buffer) {
	last = new(bytes.Buffer)
	return func(curve string) {
		req := httptest.NewRequest(http.MethodPost, "/v1/curves/"+curve+"/predictions", bytes.NewReader(body))
		req.Header.Set("Authorization", "Bearer "+token)
		req.Header.Set("Content-Type", "application/json")
		w := httptest.NewRecorder()
		last.Reset()
		w.Body = last
		h.ServeHTTP(w, req)
		if w.Code != http.StatusOK {
			b.Fatalf("status %d: %s", w.Code, w.Body.String())
		}
	}, last
}

// alternatingCPU sends b.N requests to each curve in turn, for rounds
// rounds, and returns this process's CPU time per request of each, so
// that drift of the shared machine falls on both sides.
func alternatingCPU(b *testing.B, rounds int, send func(curve string), curves ...string) []float64 {
	cpu := make([]int64, len(curves))
	b.ResetTimer()
	for range rounds {
		for k, curve := range curves {
			c0 := processCPU()
			for range b.N {
				send(curve)
			}
			cpu[k] += processCPU() - c0
		}
	}
	b.StopTimer()
	out := make([]float64, len(curves))
	for k := range cpu {
		out[k] = float64(cpu[k]) / float64(rounds*b.N)
	}
	return out
}

// processCPU is the user + system CPU time this process has used, in ns.
func processCPU() int64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return ru.Utime.Nano() + ru.Stime.Nano()
}

// BenchmarkIngestRoute is one POST /v1/runs (1 analyte, 8 levels × 2
// replicates, fit, checks, commit, with an Idempotency-Key) through the
// whole chain, 16 at a time as the harness's ingest clients. Besides this
// process's CPU per run it reports the CPU that PostgreSQL's processes on
// this machine used per run (pg-cpu-ns/op, from /proc; meaningful when
// nothing else uses the server meanwhile):
//
//	go test ./api -run '^$' -bench IngestRoute -benchmem -benchtime 2000x
func BenchmarkIngestRoute(b *testing.B) {
	e, h := newBenchServer(b)
	e.method(b, "nitrate-uv", "nitrate")
	_, inst := e.token(b, "photometer-bench", "runs:write")
	const runs = 4096
	bodies := make([][]byte, runs)
	for i := range bodies {
		bodies[i] = mustJSON(b, runBody("nitrate-uv", testInstruments[i%len(testInstruments)],
			baseTime.Add(time.Duration(i)*time.Second), standards("nitrate", uint64(i))))
	}
	var seq atomic.Int64
	b.ReportAllocs()
	b.SetParallelism(8) // 16 in flight on 2 cores
	cpu0, pg0 := processCPU(), postgresCPU()
	b.RunParallel(func(pb *testing.PB) {
		for pb.Next() {
			i := seq.Add(1)
			req := httptest.NewRequest(http.MethodPost, "/v1/runs", bytes.NewReader(bodies[i%runs]))
			req.Header.Set("Authorization", "Bearer "+inst)
			req.Header.Set("Content-Type", "application/json")
			req.Header.Set("Idempotency-Key", fmt.Sprintf("bench-%d", i))
			w := httptest.NewRecorder()
			h.ServeHTTP(w, req)
			if w.Code != http.StatusCreated {
				b.Fatalf("status %d: %s", w.Code, w.Body.String())
			}
		}
	})
	b.ReportMetric(float64(processCPU()-cpu0)/float64(b.N), "cpu-ns/op")
	b.ReportMetric(float64(postgresCPU()-pg0)/float64(b.N), "pg-cpu-ns/op")
}

// postgresCPU is procstat.PostgresCPU in ns.
func postgresCPU() int64 { return int64(procstat.PostgresCPU()) }
