package store_test

import (
	"context"
	"fmt"
	"reflect"
	"strings"
	"sync"
	"testing"
	"time"

	"curvekeeper/lab"
	"curvekeeper/store"
)

func TestGetCurveReturnsTheReportAsFitted(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)
	created, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatal(err)
	}
	got, err := db.GetCurve(ctx, created.Curves[0].ID)
	if err != nil {
		t.Fatalf("GetCurve: %v", err)
	}
	// Every float must come back bit for bit through jsonb, or predictions
	// from a stored curve would differ from the original's.
	if !reflect.DeepEqual(got.Report, curves[0].Report) {
		t.Errorf("stored report differs from the fitted one:\n got %+v\nwant %+v", got.Report, curves[0].Report)
	}
	want := curves[0].Report
	if got.Analyte != "nitrate" || got.Unit != "mg/L" || got.RunID != created.ID || got.Status != lab.StatusPendingReview ||
		got.Verdict != want.Verdict || got.EngineVersion != want.Engine || got.Model != want.Model || got.Review != nil {
		t.Errorf("curve row = %+v", got.CurveSummary)
	}
	if got.Slope == nil || *got.Slope != want.Coefficients[1] || got.Intercept == nil || *got.Intercept != want.Coefficients[0] ||
		got.RSquared == nil || *got.RSquared != want.RSquared {
		t.Errorf("scalars slope %v intercept %v r² %v, want %v and %v", got.Slope, got.Intercept, got.RSquared, want.Coefficients, want.RSquared)
	}
	p1, err1 := want.Predict([]float64{7.1, 7.2}, 2, 0.95)
	p2, err2 := got.Report.Predict([]float64{7.1, 7.2}, 2, 0.95)
	if err1 != nil || err2 != nil || !reflect.DeepEqual(p1, p2) {
		t.Errorf("prediction from the stored report = %+v (%v), from the original %+v (%v)", p2, err2, p1, err1)
	}
	_, err = db.GetCurve(ctx, created.ID) // a run id is not a curve id
	wantKind(t, err, lab.KindNotFound)
}

// storeCurves stores n runs of two curves each: instruments ic-02 and ic-03
// alternate, and acquisition times repeat every 4 runs, so many curves tie on
// acquired_at and the id must break the ties.
func storeCurves(t *testing.T, db *store.DB, m *lab.Method, n int) {
	t.Helper()
	for i := range n {
		in, curves := runInput(m, baseTime.Add(time.Duration(i%4)*time.Hour))
		in.Instrument = []string{"ic-02", "ic-03"}[i%2]
		if _, err := db.CreateRun(context.Background(), in, curves); err != nil {
			t.Fatalf("CreateRun %d: %v", i, err)
		}
	}
}

// allPages walks ListCurves from the first page to the last.
func allPages(t *testing.T, db *store.DB, f lab.CurveFilter) (ids []string, pages int) {
	t.Helper()
	var last *lab.CurveSummary
	for {
		page, err := db.ListCurves(context.Background(), f)
		if err != nil {
			t.Fatalf("ListCurves page %d: %v", pages+1, err)
		}
		pages++
		for i, c := range page.Curves {
			if last != nil && (c.AcquiredAt.After(last.AcquiredAt) || (c.AcquiredAt.Equal(last.AcquiredAt) && c.ID >= last.ID)) {
				t.Fatalf("page %d item %d (%s, %s) is not after (%s, %s) in newest-first order",
					pages, i, c.AcquiredAt, c.ID, last.AcquiredAt, last.ID)
			}
			ids = append(ids, c.ID)
			last = &page.Curves[i]
		}
		if page.NextCursor == "" {
			return ids, pages
		}
		if len(page.Curves) != f.Limit {
			t.Fatalf("page %d has %d curves and a next cursor, want %d", pages, len(page.Curves), f.Limit)
		}
		f.Cursor = page.NextCursor
	}
}

func TestListCurvesKeysetPagination(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	storeCurves(t, db, m, 25) // 50 curves

	var want []string
	rows, err := db.Pool.Query(ctx, `SELECT id::text FROM curves ORDER BY acquired_at DESC, id DESC`)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var id string
		if err := rows.Scan(&id); err != nil {
			t.Fatal(err)
		}
		want = append(want, id)
	}

	tests := []struct {
		name      string
		filter    lab.CurveFilter
		wantCount int
		wantPages int
	}{
		{"all, pages of 7", lab.CurveFilter{Limit: 7}, 50, 8},
		{"all, pages of 50", lab.CurveFilter{Limit: 50}, 50, 1},
		{"all, pages of 1", lab.CurveFilter{Limit: 1}, 50, 50},
		{"ic-03 nitrate", lab.CurveFilter{Instrument: "ic-03", Analyte: "nitrate", Limit: 5}, 12, 3},
		{"time window", lab.CurveFilter{From: baseTime.Add(time.Hour), To: baseTime.Add(3 * time.Hour), Limit: 5}, 24, 5},
		{"pending review", lab.CurveFilter{Status: lab.StatusPendingReview, Limit: 9}, 50, 6},
		{"failed", lab.CurveFilter{Verdict: lab.VerdictFail, Limit: 9}, 0, 1},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			ids, pages := allPages(t, db, tt.filter)
			if len(ids) != tt.wantCount || pages != tt.wantPages {
				t.Errorf("got %d curves in %d pages, want %d in %d", len(ids), pages, tt.wantCount, tt.wantPages)
			}
			seen := map[string]bool{}
			for _, id := range ids {
				if seen[id] {
					t.Errorf("curve %s listed twice", id)
				}
				seen[id] = true
			}
			if tt.filter.Instrument == "" && tt.filter.From.IsZero() && tt.filter.Verdict == "" && !reflect.DeepEqual(ids, want) {
				t.Errorf("pages in order = %v\nwant %v", ids, want)
			}
		})
	}

	t.Run("curves stored between pages", func(t *testing.T) {
		page1, err := db.ListCurves(ctx, lab.CurveFilter{Limit: 10})
		if err != nil {
			t.Fatal(err)
		}
		// Six newer curves arrive: one tying with the newest on page 1
		// (its UUIDv7 id is larger, so it sorts first), two later.
		for _, at := range []time.Duration{3 * time.Hour, 5 * time.Hour, 6 * time.Hour} {
			in, curves := runInput(m, baseTime.Add(at))
			if _, err := db.CreateRun(ctx, in, curves); err != nil {
				t.Fatal(err)
			}
		}
		ids, _ := allPages(t, db, lab.CurveFilter{Limit: 10, Cursor: page1.NextCursor})
		for _, c := range page1.Curves {
			for _, id := range ids {
				if id == c.ID {
					t.Errorf("curve %s of page 1 came again after the cursor", id)
				}
			}
		}
		if len(ids) != 40 {
			t.Errorf("after page 1: %d curves, want the 40 older ones", len(ids))
		}
		if n := count(t, db, "curves"); n != 56 {
			t.Errorf("curves = %d, want 56", n)
		}
	})

	for _, bad := range []struct {
		name   string
		filter lab.CurveFilter
		field  string
	}{
		{"garbage cursor", lab.CurveFilter{Cursor: "not a cursor"}, "/cursor"},
		{"short cursor", lab.CurveFilter{Cursor: "AAAA"}, "/cursor"},
		{"limit too big", lab.CurveFilter{Limit: lab.MaxCurveLimit + 1}, "/limit"},
		{"negative limit", lab.CurveFilter{Limit: -1}, "/limit"},
		{"unknown status", lab.CurveFilter{Status: "done"}, "/status"},
		{"unknown verdict", lab.CurveFilter{Verdict: "ok'; DROP TABLE curves; --"}, "/verdict"},
	} {
		t.Run(bad.name, func(t *testing.T) {
			_, err := db.ListCurves(ctx, bad.filter)
			wantKind(t, err, lab.KindInvalid)
			if got := err.(*lab.Error).Field; got != bad.field {
				t.Errorf("field = %q, want %q", got, bad.field)
			}
		})
	}
}

func TestReviewCurve(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)
	// Make the nitrite curve fail: only two levels.
	var kept []lab.Standard
	for _, s := range in.Standards {
		if s.Analyte == "nitrate" || s.Level == "L1" || s.Level == "L6" {
			kept = append(kept, s)
		}
	}
	in.Standards = kept
	curves[1] = fit(m, in.Standards, "nitrite")
	created, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatal(err)
	}
	passed, failed := created.Curves[0], created.Curves[1]
	if passed.Verdict != lab.VerdictPass || failed.Verdict != lab.VerdictFail {
		t.Fatalf("fixture verdicts %s and %s, want pass and fail", passed.Verdict, failed.Verdict)
	}

	rv, err := db.ReviewCurve(ctx, passed.ID, lab.DecisionApprove, "", "qa-test")
	if err != nil || rv.Decision != lab.DecisionApprove || rv.At.IsZero() {
		t.Fatalf("approve = %+v, %v", rv, err)
	}
	got, err := db.GetCurve(ctx, passed.ID)
	if err != nil || got.Status != lab.StatusApproved || got.Review == nil || got.Review.Actor != "qa-test" ||
		got.ReviewedBy != "qa-test" || got.ReviewedAt == nil {
		t.Errorf("approved curve = %+v, review %+v, %v", got.CurveSummary, got.Review, err)
	}
	_, err = db.ReviewCurve(ctx, passed.ID, lab.DecisionReject, "second thoughts", "qa-other")
	wantKind(t, err, lab.KindConflict)

	_, err = db.ReviewCurve(ctx, failed.ID, lab.DecisionApprove, "  ", "qa-test")
	wantKind(t, err, lab.KindInvalid)
	if f := err.(*lab.Error).Field; f != "/reason" {
		t.Errorf("field = %q, want /reason", f)
	}
	_, err = db.ReviewCurve(ctx, failed.ID, "maybe", "", "qa-test")
	wantKind(t, err, lab.KindInvalid)
	_, err = db.ReviewCurve(ctx, "0190a1b2-0000-7000-8000-000000000000", lab.DecisionApprove, "", "qa-test")
	wantKind(t, err, lab.KindNotFound)

	if _, err := db.ReviewCurve(ctx, failed.ID, lab.DecisionApprove, "two levels suffice for this screening SOP", "qa-test"); err != nil {
		t.Errorf("approving a failed curve with a reason: %v", err)
	}

	events, err := db.ListAudit(ctx, failed.ID)
	if err != nil {
		t.Fatalf("ListAudit: %v", err)
	}
	var got2 []string
	for _, e := range events {
		got2 = append(got2, e.EntityType+":"+e.Action)
	}
	want := []string{"run:run.create", "curve:curve.create", "curve:curve.review"}
	if !reflect.DeepEqual(got2, want) {
		t.Errorf("audit of the failed curve = %v, want %v", got2, want)
	}
	last := events[len(events)-1]
	if last.Actor != "qa-test" || !strings.Contains(string(last.Detail), "two levels suffice") {
		t.Errorf("review audit = %+v %s", last, last.Detail)
	}
	_, err = db.ListAudit(ctx, created.ID)
	wantKind(t, err, lab.KindNotFound)
}

func TestConcurrentReviewsOneWins(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)
	created, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatal(err)
	}
	const n = 6
	var wg sync.WaitGroup
	errs := make([]error, n)
	start := make(chan struct{})
	for i := range n {
		wg.Add(1)
		go func() {
			defer wg.Done()
			<-start
			decision := []string{lab.DecisionApprove, lab.DecisionReject}[i%2]
			_, errs[i] = db.ReviewCurve(ctx, created.Curves[0].ID, decision, fmt.Sprintf("reviewer %d", i), fmt.Sprintf("qa-%d", i))
		}()
	}
	close(start)
	wg.Wait()
	wins := 0
	for _, err := range errs {
		if err == nil {
			wins++
			continue
		}
		wantKind(t, err, lab.KindConflict)
	}
	if wins != 1 || count(t, db, "reviews") != 1 {
		t.Errorf("%d reviews succeeded (%d stored), want exactly 1", wins, count(t, db, "reviews"))
	}
}
