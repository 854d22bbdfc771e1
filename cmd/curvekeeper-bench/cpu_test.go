package main

import (
	"os"
	"testing"
	"time"
)

// cpuNow reads a process's CPU time from /proc the way getrusage sees it:
// burning 200 ms of CPU in this process shows in both of its readings.
func TestCPUNowSeesCPUTime(t *testing.T) {
	before := cpuNow(os.Getpid())
	x := 0.0
	for start := time.Now(); time.Since(start) < 200*time.Millisecond; {
		for i := 0; i < 1000; i++ {
			x += float64(i) * 1e-9
		}
	}
	d := cpuNow(os.Getpid()).sub(before)
	if x == 0 {
		t.Fatal("the loop did nothing")
	}
	// The process may be descheduled on a busy machine, so only a lower
	// bound well under the wall time is certain; 10 ms ticks round down.
	if d.server < 50*time.Millisecond || d.harness < 50*time.Millisecond {
		t.Errorf("after ~200 ms of CPU: /proc says %v, getrusage says %v", d.server, d.harness)
	}
	if d.server > 2*time.Second || d.harness > 2*time.Second {
		t.Errorf("implausible CPU times %v, %v for a 200 ms loop (wrong unit?)", d.server, d.harness)
	}
}
