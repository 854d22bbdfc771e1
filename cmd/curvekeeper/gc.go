package main

import "runtime/debug"

// The service's live heap is small (cached curves, pools, in-flight
// requests: about 10 MB under the harness's loads) while it allocates fast
// per request, so with Go's default GOGC=100 the collector ran often enough
// to take about a sixth of the prediction route's CPU. Unless the operator
// sets GOGC or GOMEMLIMIT (the Go runtime's own variables, which then apply
// as documented), the service lets the heap grow to five times the live heap
// between collections and sets a soft memory limit that makes the collector
// work harder before the process would pass it.
const (
	defaultGCPercent   = 400
	defaultMemoryLimit = 192 << 20 // bytes
)

// tuneGC applies the defaults above where getenv shows the operator set
// nothing.
func tuneGC(getenv func(string) string) {
	if getenv("GOGC") == "" {
		debug.SetGCPercent(defaultGCPercent)
	}
	if getenv("GOMEMLIMIT") == "" {
		debug.SetMemoryLimit(defaultMemoryLimit)
	}
}
