package main

import (
	"encoding/json"
	"strings"
	"testing"
	"time"
)

// checkDemoLCMS checks the LC-MS/MS batches the demo loaded (TestDemo's
// database, count runs a query): every curve passes; in the failing batch
// the mid-batch CCV withholds exactly analyte-T's four samples before it
// (not analyte-Q's); the IS-suppressed sample is withheld for its internal
// standard; and demo printed the failing batch's analyte-T curve.
func checkDemoLCMS(t *testing.T, out string, count func(string, ...any) int) {
	t.Helper()
	if n := count(`SELECT count(*) FROM curves WHERE instrument = $1`, demoLCMS); n != 2*demoLCMSBatches {
		t.Errorf("LC-MS/MS curves = %d, want %d", n, 2*demoLCMSBatches)
	}
	if n := count(`SELECT count(*) FROM curves WHERE instrument = $1 AND verdict <> 'pass'`, demoLCMS); n != 0 {
		t.Errorf("%d LC-MS/MS curves fail; the scenario plans none", n)
	}
	if n := count(`SELECT count(*) FROM curves WHERE instrument = $1 AND model = 'average_rf' AND analyte = 'analyte-Q'`, demoLCMS); n != demoLCMSBatches {
		t.Errorf("analyte-Q curves by the average RF = %d, want %d", n, demoLCMSBatches)
	}
	failing := demoPrintedID(t, out, "analyte-T of the batch whose mid-batch CCV fails:")
	if n := count(`SELECT count(*) FROM sample_results WHERE curve_id = $1 AND 'sequence_withheld' = ANY(flags) AND release_state = 'withheld'
		AND sample_id = ANY('{HGB-B2-S1,HGB-B2-S2,HGB-B2-S3,HGB-B2-S4}')`, failing); n != 4 {
		t.Errorf("withheld samples before the failing CCV on %s = %d, want 4", failing, n)
	}
	if n := count(`SELECT count(*) FROM sample_results r JOIN curves c ON c.id = r.curve_id
		WHERE c.instrument = $1 AND 'sequence_withheld' = ANY(r.flags)`, demoLCMS); n != 4 {
		t.Errorf("LC-MS/MS results withheld by a sequence = %d, want the four of analyte-T in batch %d", n, demoLCMSFailingBatch)
	}
	if n := count(`SELECT count(*) FROM sample_results r JOIN curves c ON c.id = r.curve_id
		WHERE c.instrument = $1 AND 'is_outside_window' = ANY(r.flags)`, demoLCMS); n != 2 {
		t.Errorf("LC-MS/MS results withheld for their IS = %d, want sample %d of batch %d, both analytes", n, demoLCMSSuppressedSmpl, demoLCMSSuppressed)
	}
}

// TestDemoLCMSScenarioEveryDay: the batches lie on the days before the
// clock's date (UTC) and, apart from their times, are the same whatever the
// day, so the defects sit in the same batch and sample on every day
// (TestDemoScenarioEveryDay's days, a year boundary, 29 February and a
// UTC+13 clock).
func TestDemoLCMSScenarioEveryDay(t *testing.T) {
	var days []time.Time
	for _, start := range []time.Time{time.Date(2026, 12, 28, 14, 5, 0, 0, time.UTC), time.Date(2024, 2, 26, 0, 0, 0, 0, time.UTC)} {
		for i := 0; i < 7; i++ {
			days = append(days, start.AddDate(0, 0, i))
		}
	}
	days = append(days, time.Date(2026, 6, 1, 1, 30, 0, 0, time.FixedZone("UTC+13", 13*3600)))
	undated := func(runs []map[string]any) string {
		b, err := json.Marshal(runs)
		if err != nil {
			t.Fatal(err)
		}
		var v any
		if err := json.Unmarshal(b, &v); err != nil {
			t.Fatal(err)
		}
		var strip func(any)
		strip = func(x any) {
			switch x := x.(type) {
			case map[string]any:
				delete(x, "acquired_at")
				delete(x, "time")
				for _, y := range x {
					strip(y)
				}
			case []any:
				for _, y := range x {
					strip(y)
				}
			}
		}
		strip(v)
		b, _ = json.Marshal(v)
		return string(b)
	}
	want := undated(demoLCMSRuns(days[0]))
	if !strings.Contains(want, `"responses"`) || len(demoLCMSRuns(days[0])) != demoLCMSBatches {
		t.Fatal("the scenario has no batches")
	}
	for _, now := range days {
		runs := demoLCMSRuns(now)
		if got := undated(runs); got != want {
			t.Errorf("%s: the batches differ from %s's beyond their times", now, days[0].Format(time.DateOnly))
		}
		today := time.Date(now.UTC().Year(), now.UTC().Month(), now.UTC().Day(), 0, 0, 0, 0, time.UTC)
		for i, r := range runs {
			at := r["acquired_at"].(time.Time)
			if wantDay := today.AddDate(0, 0, i-demoLCMSBatches); !at.Truncate(24 * time.Hour).Equal(wantDay) {
				t.Errorf("%s: batch %d on %s, want %s", now, i+1, at, wantDay.Format(time.DateOnly))
			}
		}
	}
}
