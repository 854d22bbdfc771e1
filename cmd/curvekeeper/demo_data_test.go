package main

import (
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"curvekeeper/calib"
)

// demoFit fits one analyte of a demo run as the service does for the demo's
// methods (their model and weighting, confidence 0.95, the default policy).
func demoFit(t *testing.T, r demoRun, analyte string) *calib.Report {
	t.Helper()
	var opts calib.Options
	for _, m := range demoMethods {
		if m.Name == r.Method {
			opts = calib.Options{Model: calib.Model(m.Model), Weighting: calib.Weighting(m.Weighting),
				Confidence: 0.95, Policy: calib.DefaultPolicy()}
		}
	}
	var pts []calib.Point
	for _, s := range r.Standards {
		if s.Analyte != analyte {
			continue
		}
		for _, y := range s.Responses {
			pts = append(pts, calib.Point{Level: s.Level, X: s.Concentration, Y: y})
		}
	}
	rep, err := calib.Fit(pts, opts)
	if err != nil {
		t.Fatalf("fit %s of the %s run of %s: %v", analyte, r.Instrument, r.AcquiredAt.Format(time.DateOnly), err)
	}
	return rep
}

func failedNames(rep *calib.Report) []string {
	var out []string
	for _, c := range rep.Checks {
		if !c.Passed {
			out = append(out, c.Name)
		}
	}
	return out
}

// demoDefects fits every run of the scenario built at now and reports what
// the engine finds: the nitrate curves failing Mandel's test, the failing
// arsenic curves whose standard As-5 reads back outside the back-calculation
// tolerance, any other failing curve, and the first and last lead slopes.
type demoDefects struct {
	runs, icp, uv       int
	mandel, badAs       []time.Time
	firstPbB1, lastPbB1 float64
	firstRun, lastRun   time.Time
	otherFailures       []string
}

func findDemoDefects(t *testing.T, now time.Time) demoDefects {
	t.Helper()
	runs := demoRuns(now)
	var d demoDefects
	d.runs = len(runs)
	d.firstRun, d.lastRun = runs[0].AcquiredAt, runs[len(runs)-1].AcquiredAt
	for _, r := range runs {
		if !r.AcquiredAt.Before(now) {
			t.Errorf("run at %s is not before the clock's %s", r.AcquiredAt, now)
		}
		switch r.Instrument {
		case demoUVVis:
			d.uv++
			rep := demoFit(t, r, "NO3-N")
			if failed := failedNames(rep); slices.Contains(failed, calib.CheckMandel) && rep.Verdict == "fail" {
				d.mandel = append(d.mandel, r.AcquiredAt)
			} else if rep.Verdict == "fail" {
				d.otherFailures = append(d.otherFailures, "NO3-N "+r.AcquiredAt.Format(time.DateOnly)+" "+strings.Join(failed, ","))
			}
		case demoICPMS:
			d.icp++
			pb := demoFit(t, r, "Pb")
			if d.firstPbB1 == 0 {
				d.firstPbB1 = pb.Coefficients[1]
			}
			d.lastPbB1 = pb.Coefficients[1]
			as := demoFit(t, r, "As")
			// The mis-pipetted level reads back outside the tolerance of the
			// back-calculation rule on every replicate (ICH M10: ±15 %).
			flagged, n := true, 0
			for _, p := range as.Points {
				if p.Level == "As-5" {
					n++
					flagged = flagged && p.HasRelativeError && math.Abs(p.RelativeErrorPct) > calib.DefaultPolicy().BackCalcTolerancePct
				}
			}
			flagged = flagged && n > 0
			if flagged && as.Verdict == "fail" {
				d.badAs = append(d.badAs, r.AcquiredAt)
			} else if as.Verdict == "fail" {
				d.otherFailures = append(d.otherFailures, "As "+r.AcquiredAt.Format(time.DateOnly)+" "+strings.Join(failedNames(as), ","))
			}
		}
	}
	return d
}

// TestDemoScenarioEveryDay builds the scenario on every day of a week and
// across a year boundary, with the clock injected, and checks with the
// engine that both defects are there each time: a nitrate curve failing
// Mandel's linearity test and a failing arsenic curve whose mis-pipetted
// standard reads back outside the tolerance; that no other curve fails; and
// that the ICP-MS lead slope falls.
func TestDemoScenarioEveryDay(t *testing.T) {
	starts := []time.Time{
		time.Date(2026, 12, 28, 14, 5, 0, 0, time.UTC), // Monday; the week runs into 2027
		time.Date(2024, 2, 26, 0, 0, 0, 0, time.UTC),   // Monday; the week holds 29 February
	}
	// A clock in another zone: 2026-06-01 01:30 in UTC+13 is still 31 May in UTC.
	tonga := time.FixedZone("UTC+13", 13*3600)
	for _, start := range starts {
		for i := 0; i < 7; i++ {
			now := start.AddDate(0, 0, i)
			t.Run(now.Format("2006-01-02-Mon"), func(t *testing.T) {
				checkDemoDefects(t, now)
			})
		}
	}
	t.Run("zone", func(t *testing.T) {
		now := time.Date(2026, 6, 1, 1, 30, 0, 0, tonga)
		checkDemoDefects(t, now)
		if got := demoRuns(now); !got[len(got)-1].AcquiredAt.Before(time.Date(2026, 5, 31, 0, 0, 0, 0, time.UTC).Add(24 * time.Hour)) {
			t.Errorf("last run %s is not on or before 31 May (UTC)", got[len(got)-1].AcquiredAt)
		}
	})
}

func checkDemoDefects(t *testing.T, now time.Time) {
	t.Helper()
	d := findDemoDefects(t, now)
	if d.runs != 30 || d.icp != 20 || d.uv != 10 {
		t.Errorf("runs = %d (ICP-MS %d, UV-Vis %d), want 30 (20, 10)", d.runs, d.icp, d.uv)
	}
	if len(d.mandel) != 1 {
		t.Errorf("nitrate curves failing Mandel's test: %v, want one", d.mandel)
	}
	if len(d.badAs) != 1 {
		t.Errorf("failing arsenic curves with As-5 off by more than the back-calculation tolerance: %v, want one", d.badAs)
	}
	if len(d.otherFailures) > 0 {
		t.Errorf("curves failing that the scenario does not plan: %v", d.otherFailures)
	}
	if !(d.lastPbB1 < 0.95*d.firstPbB1) {
		t.Errorf("Pb slope went from %.1f to %.1f; the scenario promises a loss of more than 5 %%", d.firstPbB1, d.lastPbB1)
	}
	if age := now.Sub(d.firstRun); age < 25*24*time.Hour || age > 29*24*time.Hour {
		t.Errorf("first run %s is %v before the clock, want about four weeks", d.firstRun, age)
	}
	if age := now.Sub(d.lastRun); age > 4*24*time.Hour {
		t.Errorf("last run %s is %v before the clock, want within the last working days", d.lastRun, age)
	}
}
