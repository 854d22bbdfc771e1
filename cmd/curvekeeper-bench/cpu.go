package main

import (
	"fmt"
	"os"
	"strconv"
	"strings"
	"syscall"
	"time"
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
		c.server, _ = procCPU(strconv.Itoa(serverPID), false)
	}
	var ru syscall.Rusage
	if syscall.Getrusage(syscall.RUSAGE_SELF, &ru) == nil {
		c.harness = time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
	}
	dirs, _ := os.ReadDir("/proc")
	for _, d := range dirs {
		if n := d.Name(); n[0] >= '0' && n[0] <= '9' {
			if comm, _ := os.ReadFile("/proc/" + n + "/comm"); strings.TrimSpace(string(comm)) == "postgres" {
				// With the times of its exited children, so that a backend
				// or worker that ends during a load still counts (the
				// postmaster reaps them; live ones count themselves).
				t, _ := procCPU(n, true)
				c.postgres += t
			}
		}
	}
	return c
}

// procCPU is utime + stime of process pid from /proc/pid/stat, plus cutime
// + cstime (its reaped children) when children is set.
func procCPU(pid string, children bool) (time.Duration, error) {
	raw, err := os.ReadFile("/proc/" + pid + "/stat")
	if err != nil {
		return 0, err
	}
	s := string(raw)
	end := strings.LastIndexByte(s, ')')
	if end < 0 {
		return 0, fmt.Errorf("/proc/%s/stat: no command name", pid)
	}
	f := strings.Fields(s[end+1:])
	// f[0] is field 3 (state): utime, stime, cutime, cstime are fields
	// 14 to 17.
	if len(f) < 15 {
		return 0, fmt.Errorf("/proc/%s/stat: %d fields", pid, len(f))
	}
	last := 12
	if children {
		last = 14
	}
	var ticks int64
	for i := 11; i <= last; i++ {
		v, err := strconv.ParseInt(f[i], 10, 64)
		if err != nil {
			return 0, fmt.Errorf("/proc/%s/stat: field %d: %v", pid, i+3, err)
		}
		ticks += v
	}
	return time.Duration(ticks) * time.Second / clockTicks, nil
}

// clockTicks is the kernel's USER_HZ, the unit of /proc/pid/stat times; 100
// on every Linux architecture Go runs on.
const clockTicks = 100

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
