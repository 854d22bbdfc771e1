package main

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"net"
	"net/http"
	"slices"
	"sync"
	"sync/atomic"
	"time"
)

// load is one closed-loop load: Workers goroutines each send a request,
// wait for its answer and send the next, until Max requests were started or
// Duration has passed, whichever comes first.
type load struct {
	Workers  int
	Max      int
	Duration time.Duration
	// Do performs request number seq (0-based, unique across workers).
	Do func(ctx context.Context, seq int) error
	// Rate, when positive, paces the load open-loop: request seq is due at
	// seq/Rate seconds after the start, its worker waits for that moment,
	// and its latency counts from when it was due (not from when a worker
	// got to it), so a server that falls behind shows its queue in the
	// percentiles instead of slowing the load down.
	Rate float64
	// ServerPID is the process serving the load, for its CPU time (see
	// cpu.go); -1 when the load runs inside the harness, 0 to measure none.
	ServerPID int
}

// result is what a load measured.
type result struct {
	N        int             // requests that succeeded
	Errors   int             // requests that failed
	FirstErr error           // the first failure, for the report
	Elapsed  time.Duration   // wall time of the load
	Lat      []time.Duration // latency of every successful request
	CPU      cpuTimes        // used during the load (see cpu.go); zero unless ServerPID was set
}

// run drives l and returns what it measured.
func (l load) run(ctx context.Context) result {
	ctx, cancel := context.WithTimeout(ctx, l.Duration)
	defer cancel()
	var (
		next   atomic.Int64
		mu     sync.Mutex
		res    result
		wg     sync.WaitGroup
		errors atomic.Int64
	)
	var cpu0 cpuTimes
	if l.ServerPID != 0 {
		cpu0 = cpuNow(max(l.ServerPID, 0))
	}
	start := time.Now()
	for w := 0; w < l.Workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			lat := make([]time.Duration, 0, 1024)
			var first error
			for ctx.Err() == nil {
				seq := int(next.Add(1) - 1)
				if seq >= l.Max {
					break
				}
				t0 := time.Now()
				if l.Rate > 0 {
					due := start.Add(time.Duration(float64(seq) / l.Rate * float64(time.Second)))
					if wait := time.Until(due); wait > 0 {
						select {
						case <-time.After(wait):
						case <-ctx.Done():
						}
						if ctx.Err() != nil {
							break
						}
					}
					t0 = due
				}
				err := l.Do(ctx, seq)
				d := time.Since(t0)
				if err != nil {
					if ctx.Err() != nil {
						break // the deadline cut this request short: not a failure
					}
					errors.Add(1)
					if first == nil {
						first = err
					}
					continue
				}
				lat = append(lat, d)
			}
			mu.Lock()
			res.Lat = append(res.Lat, lat...)
			if res.FirstErr == nil {
				res.FirstErr = first
			}
			mu.Unlock()
		}()
	}
	wg.Wait()
	res.Elapsed = time.Since(start)
	if l.ServerPID != 0 {
		res.CPU = cpuNow(max(l.ServerPID, 0)).sub(cpu0)
	}
	res.N = len(res.Lat)
	res.Errors = int(errors.Load())
	return res
}

// add merges another round of the same load into r.
func (r *result) add(o result) {
	r.N += o.N
	r.Errors += o.Errors
	r.Elapsed += o.Elapsed
	r.Lat = append(r.Lat, o.Lat...)
	r.CPU = r.CPU.plus(o.CPU)
	if r.FirstErr == nil {
		r.FirstErr = o.FirstErr
	}
}

// rate is successful requests per second of wall time.
func (r result) rate() float64 {
	if r.Elapsed <= 0 {
		return 0
	}
	return float64(r.N) / r.Elapsed.Seconds()
}

// percentile returns the q-quantile (0 < q ≤ 1) of the latencies in
// milliseconds, by the nearest-rank method; 0 without samples.
func (r result) percentile(q float64) float64 {
	if len(r.Lat) == 0 {
		return 0
	}
	s := slices.Clone(r.Lat)
	slices.Sort(s)
	rank := int(q*float64(len(s))+0.999999) - 1
	rank = max(0, min(rank, len(s)-1))
	return float64(s[rank].Microseconds()) / 1000
}

// newClient returns an HTTP client that keeps up to conns connections to
// one host open and reuses them.
func newClient(conns int) *http.Client {
	return &http.Client{
		Timeout: 30 * time.Second,
		Transport: &http.Transport{
			DialContext:         (&net.Dialer{Timeout: 5 * time.Second, KeepAlive: 30 * time.Second}).DialContext,
			MaxIdleConns:        conns,
			MaxIdleConnsPerHost: conns,
			MaxConnsPerHost:     conns,
			IdleConnTimeout:     90 * time.Second,
			DisableCompression:  true,
		},
	}
}

// call sends one request and reads the whole answer; a status other than
// want is an error that quotes the start of the body.
func call(ctx context.Context, cl *http.Client, method, url, token string, body []byte, want int, hdr ...string) ([]byte, error) {
	var rd io.Reader
	if body != nil {
		rd = bytes.NewReader(body)
	}
	req, err := http.NewRequestWithContext(ctx, method, url, rd)
	if err != nil {
		return nil, err
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	if body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	for i := 0; i+1 < len(hdr); i += 2 {
		req.Header.Set(hdr[i], hdr[i+1])
	}
	resp, err := cl.Do(req)
	if err != nil {
		return nil, err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		return nil, err
	}
	if resp.StatusCode != want {
		if len(b) > 300 {
			b = b[:300]
		}
		return nil, fmt.Errorf("%s %s: status %d, want %d: %s", method, req.URL.Path, resp.StatusCode, want, b)
	}
	return b, nil
}
