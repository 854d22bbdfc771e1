package main

import (
	"os"
	"testing"
	"time"
)

// cpuNow reads a process's CPU time from /proc the way getrusage sees it:
// burning 200 ms of CPU in this process shows in both of its readings.
func TestCPUNowSeesCPUTime(t *testing.T) {
	// Spin until getrusage says this process used 200 ms of CPU (not 200 ms
	// of wall time: on a busy machine the process may get a fraction of a
	// core), then compare /proc with it. The wall-time cap only stops a
	// broken clock from hanging the test.
	const want = 200 * time.Millisecond
	before := cpuNow(os.Getpid())
	x := 0.0
	var d cpuTimes
	for start := time.Now(); time.Since(start) < 2*time.Minute; {
		for i := 0; i < 100000; i++ {
			x += float64(i) * 1e-9
		}
		if d = cpuNow(os.Getpid()).sub(before); d.harness >= want {
			break
		}
	}
	if x == 0 {
		t.Fatal("the loop did nothing")
	}
	if d.harness < want {
		t.Fatalf("getrusage saw %v of CPU after two minutes of spinning", d.harness)
	}
	// /proc counts in clock ticks (10 ms) and the process's other threads
	// (the runtime's, the test framework's) add a little: the two readings
	// agree within a tick or two and a few percent.
	if d.server < d.harness-30*time.Millisecond || d.server > d.harness+d.harness/4+30*time.Millisecond {
		t.Errorf("after %v of CPU by getrusage, /proc says %v", d.harness, d.server)
	}
	if d.server > 2*time.Second || d.harness > 2*time.Second {
		t.Errorf("implausible CPU times %v, %v for a 200 ms loop (wrong unit?)", d.server, d.harness)
	}
}
