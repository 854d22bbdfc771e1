package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"slices"
	"strings"
	"time"
)

// scenarioNames are every scenario, in the order they run.
var scenarioNames = []string{"startup", "ingest", "ingest_large", "predict", "history", "fit", "fit_4pl", "growth"}

// defaultScenarios run unless -scenarios says otherwise: every one but
// growth, whose load of millions of readings takes minutes on its own.
var defaultScenarios = scenarioNames[:len(scenarioNames)-1]

// config is every setting of one harness run, parsed once from flags.
type config struct {
	Quick       bool
	DatabaseURL string   // "" starts a private cluster in a temporary folder
	Scenarios   []string // subset of scenarioNames
	ProfileDir  string   // "" takes no profiles; else CPU profiles of the service go here
	Budget      time.Duration

	// Sizes, set from Quick unless a test sets them.
	Rounds         int           // alternations of service and baseline per load scenario
	PhaseTime      time.Duration // per round and side
	IngestMax      int           // requests per round and side
	LargeMax       int           // large runs (100 analytes × 8 levels) per round and side
	PredictMax     int
	HistoryCurves  int // curves bulk-loaded
	HistoryPair    int // of which in the queried instrument and analyte
	HistoryPage    int // the deep page measured (1-based)
	HistorySamples int // requests per page measured
	StartupRepeats int
	FitLoops       int
	GrowthReadings int // readings in the large database of the growth scenario
	GrowthRequests int // requests per operation and side
}

func parseConfig(args []string, getenv func(string) string, stderr io.Writer) (config, error) {
	var cfg config
	fs := flag.NewFlagSet("curvekeeper-bench", flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.BoolVar(&cfg.Quick, "quick", false, "a smaller run, at most 60 s")
	fs.StringVar(&cfg.DatabaseURL, "database-url", getenv("DATABASE_URL"), "PostgreSQL server to make a fresh database on; empty starts a private cluster (DATABASE_URL)")
	only := fs.String("scenarios", strings.Join(defaultScenarios, ","), "comma-separated scenarios to run (of "+strings.Join(scenarioNames, ",")+")")
	growth := fs.Int("growth-readings", 0, "readings in the growth scenario's large database (0: 10,000,000, or 200,000 with -quick)")
	fs.StringVar(&cfg.ProfileDir, "profile-dir", "", "write CPU profiles of the service under load to this folder (enables its pprof listener)")
	if err := fs.Parse(args); err != nil {
		return cfg, err
	}
	for _, s := range strings.Split(*only, ",") {
		s = strings.TrimSpace(s)
		if s == "" {
			continue
		}
		if !slices.Contains(scenarioNames, s) {
			return cfg, fmt.Errorf("unknown scenario %q (want some of %s)", s, strings.Join(scenarioNames, ","))
		}
		cfg.Scenarios = append(cfg.Scenarios, s)
	}
	if len(cfg.Scenarios) == 0 {
		return cfg, errors.New("no scenario selected")
	}
	cfg.setSizes()
	if *growth < 0 {
		return cfg, errors.New("-growth-readings must not be negative")
	}
	if *growth > 0 {
		cfg.GrowthReadings = *growth
	}
	if cfg.has("growth") {
		// The load takes about 1 minute per million readings on a busy
		// 2-core machine; allow three.
		cfg.Budget += time.Duration(cfg.GrowthReadings/1000) * 180 * time.Millisecond
	}
	return cfg, nil
}

// setSizes fills the run's sizes. Every load is capped in requests and in
// time. Budget is the hard deadline of the run after the two binaries are
// built: the quick run takes about a minute; the full run took 103-108 s on a
// 2-core machine (the 1,000,000-curve COPY and index rebuild 14-16 s of
// it). When the machine is shared and busy the load has taken minutes, so
// a run that would pass 5 minutes stops with an error rather than report.
func (c *config) setSizes() {
	if c.Quick {
		c.Budget = 60 * time.Second
		c.Rounds, c.PhaseTime = 2, 1500*time.Millisecond
		c.IngestMax, c.PredictMax, c.LargeMax = 400, 20000, 6
		c.HistoryCurves, c.HistoryPair, c.HistoryPage, c.HistorySamples = 12_000, 10_500, 200, 200
		c.StartupRepeats, c.FitLoops = 1, 500
		c.GrowthReadings, c.GrowthRequests = 200_000, 300
		return
	}
	c.Budget = 5 * time.Minute
	c.Rounds, c.PhaseTime = 3, 5*time.Second
	c.IngestMax, c.PredictMax, c.LargeMax = 5000, 200000, 40
	c.HistoryCurves, c.HistoryPair, c.HistoryPage, c.HistorySamples = 1_000_000, 100_000, 1000, 1500
	c.StartupRepeats, c.FitLoops = 3, 3000
	c.GrowthReadings, c.GrowthRequests = 10_000_000, 1500
}

func (c config) has(s string) bool { return slices.Contains(c.Scenarios, s) }
