package store_test

import (
	"context"
	"strings"
	"testing"
	"time"

	"curvekeeper/lab"
)

// TestHistoryQueryUsesIndexes loads 100,000 curves with SQL (one run, 40
// instruments, 3 analytes, 95 % already reviewed), analyses the table and
// checks with EXPLAIN (no ANALYZE) of the generic plan that each history query
// shape is an index scan in the requested order, with no sort and no
// sequential scan.
func TestHistoryQueryUsesIndexes(t *testing.T) {
	if testing.Short() {
		t.Skip("loads 100,000 curves")
	}
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)
	created, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatal(err)
	}
	_, err = db.Pool.Exec(ctx, `
INSERT INTO curves (id, run_id, method, method_revision, instrument, analyte, unit, model, weighting, verdict,
                    status, engine_version, report, acquired_at, created_by, reviewed_at, reviewed_by, slope)
SELECT gen_random_uuid(), $1, $2, 1, 'ic-' || (g % 40), (ARRAY['nitrate', 'nitrite', 'sulfate'])[g % 3 + 1], 'mg/L',
       'linear', 'none', CASE WHEN g % 17 = 0 THEN 'fail' ELSE 'pass' END,
       CASE WHEN g % 20 = 0 THEN 'pending_review' ELSE 'approved' END,
       'calib/1.0.0', '{}', $3::timestamptz - g * interval '1 minute', 'bulk',
       CASE WHEN g % 20 = 0 THEN NULL ELSE now() END, CASE WHEN g % 20 = 0 THEN NULL ELSE 'qa' END, 1.5
FROM generate_series(1, 100000) g`, created.ID, m.Name, baseTime)
	if err != nil {
		t.Fatalf("bulk load: %v", err)
	}
	if _, err := db.Pool.Exec(ctx, `ANALYZE curves`); err != nil {
		t.Fatal(err)
	}
	// A cursor deep in the history of ic-7 nitrite.
	deep, err := db.ListCurves(ctx, lab.CurveFilter{Instrument: "ic-7", Analyte: "nitrite", Limit: 500})
	if err != nil || deep.NextCursor == "" {
		t.Fatalf("ListCurves for a cursor: %v (cursor %q)", err, deep.NextCursor)
	}

	// Cursors are bound to their filters: the unfiltered history needs its own.
	deepAll, err := db.ListCurves(ctx, lab.CurveFilter{Limit: 500})
	if err != nil || deepAll.NextCursor == "" {
		t.Fatalf("ListCurves for an unfiltered cursor: %v (cursor %q)", err, deepAll.NextCursor)
	}
	if _, err := db.ListCurves(ctx, lab.CurveFilter{Cursor: deep.NextCursor}); lab.KindOf(err) != lab.KindInvalid {
		t.Errorf("a cursor issued for ic-7 nitrite was accepted without those filters: err %v", err)
	}

	tests := []struct {
		name      string
		filter    lab.CurveFilter
		wantIndex string
	}{
		{"instrument and analyte, page 1", lab.CurveFilter{Instrument: "ic-7", Analyte: "nitrite"}, "curves_history"},
		{"instrument and analyte, deep cursor", lab.CurveFilter{Instrument: "ic-7", Analyte: "nitrite", Cursor: deep.NextCursor}, "curves_history"},
		{"instrument, analyte and status", lab.CurveFilter{Instrument: "ic-7", Analyte: "nitrite", Status: lab.StatusApproved}, "curves_approved_history"}, // the partial index of migration 000003
		{"instrument, analyte and window", lab.CurveFilter{Instrument: "ic-7", Analyte: "nitrite",
			From: baseTime.Add(-30 * 24 * time.Hour), To: baseTime.Add(-20 * 24 * time.Hour)}, "curves_history"},
		{"everything, page 1", lab.CurveFilter{}, "curves_recent"},
		{"everything, deep cursor", lab.CurveFilter{Cursor: deepAll.NextCursor}, "curves_recent"},
		{"review queue", lab.CurveFilter{Status: lab.StatusPendingReview}, "curves_pending"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if _, err := db.ListCurves(ctx, tt.filter); err != nil {
				t.Fatal(err)
			}
			lines, err := db.ExplainListCurves(ctx, tt.filter)
			if err != nil {
				t.Fatalf("ExplainListCurves: %v", err)
			}
			plan := strings.Join(lines, "\n")
			t.Logf("plan:\n%s", plan)
			if !strings.Contains(plan, "Index Scan using "+tt.wantIndex+" on curves") {
				t.Errorf("plan does not scan index %s", tt.wantIndex)
			}
			if strings.Contains(plan, "Seq Scan") || strings.Contains(plan, "Sort") {
				t.Errorf("plan sorts or scans the table")
			}
			if tt.filter.Cursor != "" && !strings.Contains(plan, "Index Cond: ") {
				t.Errorf("plan has no index condition for the cursor")
			}
		})
	}
}
