// Package procstat reads CPU times of processes from Linux's /proc, for the
// performance harness and the in-process route benchmarks: the CPU a
// process (or every PostgreSQL process) used over a load, which on a
// saturated machine bounds the rate that load can reach.
package procstat

import (
	"fmt"
	"os"
	"strconv"
	"strings"
	"time"
)

// clockTicks is the kernel's USER_HZ, the unit of /proc/pid/stat times; 100
// on every Linux architecture Go runs on.
const clockTicks = 100

// ProcessCPU is utime + stime of process pid from /proc/pid/stat, plus
// cutime + cstime (its reaped children) when children is set.
func ProcessCPU(pid int, children bool) (time.Duration, error) {
	return procCPU(strconv.Itoa(pid), children)
}

// PostgresCPU is the CPU time of every process called postgres on this
// machine, with the times of their exited children, so that a backend or
// worker that ends during a load still counts (the postmaster reaps them;
// live ones count themselves).
func PostgresCPU() time.Duration {
	var total time.Duration
	dirs, _ := os.ReadDir("/proc")
	for _, d := range dirs {
		if n := d.Name(); n[0] >= '0' && n[0] <= '9' {
			if comm, _ := os.ReadFile("/proc/" + n + "/comm"); strings.TrimSpace(string(comm)) == "postgres" {
				t, _ := procCPU(n, true)
				total += t
			}
		}
	}
	return total
}

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
