package main

import (
	"context"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
)

const (
	fitRounds     = 3
	fitBenchFile  = "calib/bench_test.go"
	fitScriptFile = "testdata/gen/bench_statsmodels.py"
	// fit4PLScriptFile times scipy's curve_fit for the fit_4pl line.
	fit4PLScriptFile = "testdata/gen/bench_scipy_4pl.py"
	python           = "/usr/bin/python3"
)

var (
	goNsPerOp = regexp.MustCompile(`BenchmarkFullReport\S*\s+\d+\s+([0-9.]+) ns/op`)
	pyNsPerOp = regexp.MustCompile(`BenchmarkStatsmodelsWLS.*: ([0-9.]+) ns/op`)

	go4PLNsPerOp = regexp.MustCompile(`BenchmarkFullReport4PL\S*\s+\d+\s+([0-9.]+) ns/op`)
	py4PLNsPerOp = regexp.MustCompile(`BenchmarkScipyCurveFit4PL/\S+ params [^:]*: ([0-9.]+) ns/op`)
)

// comparison is one engine benchmark against a Python baseline, run side
// by side in alternating rounds.
type comparison struct {
	scenario, bench, script, module string
	goRe, pyRe                      *regexp.Regexp
	target                          float64
	serviceIs, baselineIs           string
}

// fit compares calib's full report (BenchmarkFullReport in
// calib/bench_test.go: the fit, every check, the limits and one inverse
// prediction) with statsmodels' bare WLS fit of the same data
// (testdata/gen/bench_statsmodels.py), both run now, in alternating rounds.
// The figures are fits per second.
func (h *harness) fit(ctx context.Context) error {
	return h.compare(ctx, comparison{scenario: "fit", bench: "BenchmarkFullReport", script: fitScriptFile, module: "statsmodels",
		goRe: goNsPerOp, pyRe: pyNsPerOp, target: 8,
		serviceIs: "calib full report + 1 prediction", baselineIs: "statsmodels WLS fit"})
}

// fit4PL compares calib's full report of a 1/y²-weighted 4PL
// (BenchmarkFullReport4PL: self-start, fit, every check, the precision
// profile, one inverse prediction with its band-inversion interval) with
// scipy's bare curve_fit of the same data and weights
// (testdata/gen/bench_scipy_4pl.py; the faster of its two variants).
func (h *harness) fit4PL(ctx context.Context) error {
	return h.compare(ctx, comparison{scenario: "fit_4pl", bench: "BenchmarkFullReport4PL", script: fit4PLScriptFile, module: "scipy",
		goRe: go4PLNsPerOp, pyRe: py4PLNsPerOp, target: 20,
		serviceIs: "calib 4PL full report + 1 prediction", baselineIs: "scipy curve_fit, faster of trf/lm"})
}

// compare runs one comparison and prints its line.
func (h *harness) compare(ctx context.Context, c comparison) error {
	for _, f := range []string{fitBenchFile, c.script} {
		if _, err := os.Stat(filepath.Join(h.root, f)); err != nil {
			skipped(h.out, c.scenario, f+" is not in this checkout")
			return nil
		}
	}
	if err := exec.CommandContext(ctx, python, "-c", "import "+c.module).Run(); err != nil {
		skipped(h.out, c.scenario, python+" has no "+c.module)
		return nil
	}
	if h.calibTest == "" {
		skipped(h.out, c.scenario, "the calib test binary was not built")
		return nil
	}
	// Both sides run in fitRounds rounds, alternating which goes first, and
	// each side's best is kept: a burst of other work on the machine (the
	// database's autovacuum after the history load, say) then weighs on
	// one repeat, not on one side.
	goNs, pyNs := math.Inf(1), math.Inf(1)
	// side returns one repeat of a side: it runs the command made by mk and
	// keeps the least ns/op that re finds in its output in best.
	side := func(what string, re *regexp.Regexp, best *float64, mk func() *exec.Cmd) func() error {
		return func() error {
			out, err := mk().CombinedOutput()
			if err != nil {
				return fmt.Errorf("%s: %w\n%s", what, err, out)
			}
			ns, err := bestNs(re, out)
			if err != nil {
				return fmt.Errorf("%s: %w\n%s", what, err, out)
			}
			*best = math.Min(*best, ns)
			return nil
		}
	}
	runGo := side("calib benchmark", c.goRe, &goNs, func() *exec.Cmd {
		cmd := exec.CommandContext(ctx, h.calibTest, "-test.run", "^$", "-test.bench", "^"+c.bench+"$",
			"-test.benchtime", strconv.Itoa(h.cfg.FitLoops)+"x", "-test.count", "7")
		cmd.Dir = filepath.Join(h.root, "calib")
		return cmd
	})
	runPy := side(c.module+" benchmark", c.pyRe, &pyNs, func() *exec.Cmd {
		cmd := exec.CommandContext(ctx, python, c.script)
		cmd.Dir = h.root
		return cmd
	})
	for round := 0; round < fitRounds; round++ {
		h.progress("%s round %d/%d: %s and %s", c.scenario, round+1, fitRounds, c.bench, c.module)
		first, second := runGo, runPy
		if round%2 == 1 {
			first, second = runPy, runGo
		}
		if err := first(); err != nil {
			return err
		}
		if err := second(); err != nil {
			return err
		}
	}
	fmt.Fprintln(h.out, line{Scenario: c.scenario, Service: 1e9 / goNs, Baseline: 1e9 / pyNs, Unit: "fits/s",
		Target: target{"ratio", ">=", c.target}, Extra: []string{kv("service_ns_op", goNs), kv("baseline_ns_op", pyNs),
			kv("service_is", fmt.Sprintf("%s (best of %d)", c.serviceIs, 7*fitRounds)),
			kv("baseline_is", fmt.Sprintf("%s (best of %d)", c.baselineIs, 7*fitRounds))}})
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
