package main

import (
	"syscall"
	"time"

	"curvekeeper/cmd/curvekeeper-bench/procstat"
)

// cpuTimes is CPU time (user + system) used so far by the processes a load
// involves: the process serving it (the service, or the bare baseline
// server), this harness (the load generator, and for the ingest baseline
// also the inserting goroutines) and every PostgreSQL process on the
// machine. Divided by the requests of a load, it shows where each side's
// work per request goes; on a machine running nothing else that is what
// bounds the rate when the cores are saturated.
type cpuTimes struct {
	server, harness, postgres time.Duration
}

func (a cpuTimes) sub(b cpuTimes) cpuTimes {
	return cpuTimes{a.server - b.server, a.harness - b.harness, a.postgres - b.postgres}
}

func (a cpuTimes) plus(b cpuTimes) cpuTimes {
	return cpuTimes{a.server + b.server, a.harness + b.harness, a.postgres + b.postgres}
}

// cpuNow reads the CPU times now; serverPID 0 means no server process (the
// ingest baseline runs inside the harness).
func cpuNow(serverPID int) cpuTimes {
	var c cpuTimes
	if serverPID > 0 {
		c.server, _ = procstat.ProcessCPU(serverPID, false)
	}
	var ru syscall.Rusage
	if syscall.Getrusage(syscall.RUSAGE_SELF, &ru) == nil {
		c.harness = time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
	}
	c.postgres = procstat.PostgresCPU()
	return c
}

// cpuPerRequest are the key=value fields of a result's CPU per request, in
// µs, with prefix ("" or "baseline_").
func cpuPerRequest(prefix string, r result) []string {
	if r.N == 0 {
		return nil
	}
	us := func(d time.Duration) float64 { return float64(d.Microseconds()) / float64(r.N) }
	return []string{
		kv(prefix+"server_cpu_us", us(r.CPU.server)),
		kv(prefix+"harness_cpu_us", us(r.CPU.harness)),
		kv(prefix+"postgres_cpu_us", us(r.CPU.postgres)),
	}
}
