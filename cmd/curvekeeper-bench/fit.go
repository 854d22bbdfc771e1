package main

import (
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
)

const (
	fitBenchFile  = "calib/bench_test.go"
	fitScriptFile = "testdata/gen/bench_statsmodels.py"
	python        = "/usr/bin/python3"
)

var (
	goNsPerOp = regexp.MustCompile(`BenchmarkFullReport\S*\s+\d+\s+([0-9.]+) ns/op`)
	pyNsPerOp = regexp.MustCompile(`BenchmarkStatsmodelsWLS.*: ([0-9.]+) ns/op`)
)

// fit compares calib's full report (BenchmarkFullReport in
// calib/bench_test.go: the fit, every check, the limits and one inverse
// prediction) with statsmodels' bare WLS fit of the same data
// (testdata/gen/bench_statsmodels.py), both run now, one after the other.
// The figures are fits per second.
func (h *harness) fit(ctx context.Context) error {
	for _, f := range []string{fitBenchFile, fitScriptFile} {
		if _, err := os.Stat(filepath.Join(h.root, f)); err != nil {
			skipped(h.out, "fit", f+" is not in this checkout")
			return nil
		}
	}
	if err := exec.CommandContext(ctx, python, "-c", "import statsmodels").Run(); err != nil {
		skipped(h.out, "fit", python+" has no statsmodels")
		return nil
	}
	if h.calibTest == "" {
		skipped(h.out, "fit", "the calib test binary was not built")
		return nil
	}
	h.progress("fit: BenchmarkFullReport, then statsmodels")
	gocmd := exec.CommandContext(ctx, h.calibTest, "-test.run", "^$", "-test.bench", "^BenchmarkFullReport$",
		"-test.benchtime", strconv.Itoa(h.cfg.FitLoops)+"x", "-test.count", "7")
	gocmd.Dir = filepath.Join(h.root, "calib")
	goOut, err := gocmd.CombinedOutput()
	if err != nil {
		return fmt.Errorf("calib benchmark: %w\n%s", err, goOut)
	}
	goNs, err := bestNs(goNsPerOp, goOut)
	if err != nil {
		return fmt.Errorf("go benchmark: %w\n%s", err, goOut)
	}
	pycmd := exec.CommandContext(ctx, python, fitScriptFile)
	pycmd.Dir = h.root
	pyOut, err := pycmd.CombinedOutput()
	if err != nil {
		return fmt.Errorf("statsmodels benchmark: %w\n%s", err, pyOut)
	}
	pyNs, err := bestNs(pyNsPerOp, pyOut)
	if err != nil {
		return fmt.Errorf("statsmodels benchmark: %w\n%s", err, pyOut)
	}
	fmt.Fprintln(h.out, line{Scenario: "fit", Service: 1e9 / goNs, Baseline: 1e9 / pyNs, Unit: "fits/s",
		Target: target{"ratio", ">=", 8}, Extra: []string{kv("service_ns_op", goNs), kv("baseline_ns_op", pyNs),
			kv("service_is", "calib full report + 1 prediction (best of 7)"), kv("baseline_is", "statsmodels WLS fit (best of 7)")}})
	return nil
}

// buildCalibTest compiles calib's test binary (for BenchmarkFullReport)
// into dir, or returns "" when the benchmark is not in this checkout.
func buildCalibTest(ctx context.Context, root, dir string) (string, error) {
	if _, err := os.Stat(filepath.Join(root, fitBenchFile)); err != nil {
		return "", nil
	}
	bin := filepath.Join(dir, "calib.test")
	cmd := exec.CommandContext(ctx, "go", "test", "-c", "-o", bin, "./calib")
	cmd.Dir = root
	if out, err := cmd.CombinedOutput(); err != nil {
		return "", fmt.Errorf("build the calib test binary: %w\n%s", err, out)
	}
	return bin, nil
}

// bestNs is the smallest ns/op re matches in out.
func bestNs(re *regexp.Regexp, out []byte) (float64, error) {
	best := 0.0
	for _, m := range re.FindAllSubmatch(out, -1) {
		v, err := strconv.ParseFloat(string(m[1]), 64)
		if err != nil {
			return 0, err
		}
		if best == 0 || v < best {
			best = v
		}
	}
	if best == 0 {
		return 0, fmt.Errorf("no ns/op figure in the output")
	}
	return best, nil
}
