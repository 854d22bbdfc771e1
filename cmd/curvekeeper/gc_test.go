package main

import (
	"runtime/debug"
	"testing"
)

// tuneGC sets the service's collector defaults only where the operator set
// neither GOGC nor GOMEMLIMIT.
func TestTuneGCLeavesOperatorSettings(t *testing.T) {
	prevPercent := debug.SetGCPercent(100)
	prevLimit := debug.SetMemoryLimit(-1)
	t.Cleanup(func() {
		debug.SetGCPercent(prevPercent)
		debug.SetMemoryLimit(prevLimit)
	})
	for _, tc := range []struct {
		env         map[string]string
		wantPercent int
		wantLimit   int64
	}{
		{map[string]string{}, defaultGCPercent, defaultMemoryLimit},
		{map[string]string{"GOGC": "100"}, 100, defaultMemoryLimit},
		{map[string]string{"GOMEMLIMIT": "1GiB"}, defaultGCPercent, 7 << 30},
	} {
		debug.SetGCPercent(100)
		debug.SetMemoryLimit(7 << 30) // stands for whatever the runtime read from the environment
		tuneGC(func(k string) string { return tc.env[k] })
		if got := debug.SetGCPercent(100); got != tc.wantPercent {
			t.Errorf("env %v: GC percent %d, want %d", tc.env, got, tc.wantPercent)
		}
		if got := debug.SetMemoryLimit(-1); got != tc.wantLimit {
			t.Errorf("env %v: memory limit %d, want %d", tc.env, got, tc.wantLimit)
		}
	}
}
