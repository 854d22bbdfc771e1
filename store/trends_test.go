package store_test

import (
	"context"
	"slices"
	"testing"
	"time"

	"curvekeeper/lab"
	"curvekeeper/store"
)

func TestTrendSeriesAndApprovedSlopes(t *testing.T) {
	ctx := context.Background()
	db := newDB(t)
	m := mustMethod(t, db, "nitrate-ic")
	var nitrate []string // curve ids, oldest first
	for i := 0; i < 5; i++ {
		in, curves := runInput(m, baseTime.Add(time.Duration(i)*24*time.Hour))
		created, err := db.CreateRun(ctx, in, curves)
		if err != nil {
			t.Fatal(err)
		}
		for _, c := range created.Curves {
			if c.Analyte == "nitrate" {
				nitrate = append(nitrate, c.ID)
			}
		}
	}
	// Approve the first three, reject the fourth, leave the fifth pending.
	for i, id := range nitrate[:4] {
		d := lab.DecisionApprove
		if i == 3 {
			d = lab.DecisionReject
		}
		if _, err := db.ReviewCurve(ctx, id, d, "test", "qa-test"); err != nil {
			t.Fatal(err)
		}
	}
	t.Run("series oldest first, every status", func(t *testing.T) {
		got, truncated, err := db.TrendSeries(ctx, lab.TrendFilter{Instrument: "ic-02", Analyte: "nitrate"})
		if err != nil {
			t.Fatal(err)
		}
		if truncated || len(got) != 5 {
			t.Fatalf("got %d curves (truncated %v), want 5", len(got), truncated)
		}
		for i, c := range got {
			if c.ID != nitrate[i] {
				t.Errorf("curve %d = %s, want %s", i, c.ID, nitrate[i])
			}
			if v, ok := c.ParamValue(lab.ParamSlope); !ok || v <= 0 {
				t.Errorf("slope of curve %d = %v, %v", i, v, ok)
			}
		}
		if got[3].Status != lab.StatusRejected || got[4].Status != lab.StatusPendingReview {
			t.Errorf("statuses %s, %s", got[3].Status, got[4].Status)
		}
	})
	t.Run("window", func(t *testing.T) {
		got, _, err := db.TrendSeries(ctx, lab.TrendFilter{Instrument: "ic-02", Analyte: "nitrate",
			From: baseTime.Add(24 * time.Hour), To: baseTime.Add(3 * 24 * time.Hour)})
		if err != nil {
			t.Fatal(err)
		}
		if len(got) != 2 || got[0].ID != nitrate[1] || got[1].ID != nitrate[2] {
			t.Errorf("window gave %d curves", len(got))
		}
	})
	t.Run("needs instrument and analyte", func(t *testing.T) {
		_, _, err := db.TrendSeries(ctx, lab.TrendFilter{Instrument: "ic-02"})
		wantKind(t, err, lab.KindInvalid)
	})
	t.Run("recent approved slopes, oldest first, before the new curve", func(t *testing.T) {
		got, err := db.RecentApprovedSlopes(ctx, "ic-02", "nitrate", baseTime.Add(10*24*time.Hour), 2)
		if err != nil {
			t.Fatal(err)
		}
		all, _, _ := db.TrendSeries(ctx, lab.TrendFilter{Instrument: "ic-02", Analyte: "nitrate"})
		want := []float64{*all[1].Slope, *all[2].Slope}
		if len(got) != 2 || got[0] != want[0] || got[1] != want[1] {
			t.Errorf("got %v, want %v (the two newest approved, oldest first)", got, want)
		}
		none, err := db.RecentApprovedSlopes(ctx, "ic-02", "nitrate", baseTime, 20)
		if err != nil || len(none) != 0 {
			t.Errorf("before the first curve: %v, %v", none, err)
		}
	})
	t.Run("ReadForRun reads the method and the same slopes in one batch", func(t *testing.T) {
		before := baseTime.Add(10 * 24 * time.Hour)
		got, err := db.ReadForRun(ctx, lab.RunReadsQuery{Method: m.Name, Instrument: "ic-02",
			Analytes: []string{"nitrate", "nitrate", "sulfate"}, Before: before, Limit: 2})
		if err != nil {
			t.Fatal(err)
		}
		if got.Replay != nil || got.Method == nil || got.Method.Name != m.Name || got.Method.Revision != m.Revision {
			t.Fatalf("ReadForRun = %+v, want method %s/%d and no replay", got, m.Name, m.Revision)
		}
		for _, a := range []string{"nitrate", "sulfate"} {
			want, err := db.RecentApprovedSlopes(ctx, "ic-02", a, before, 2)
			if err != nil {
				t.Fatal(err)
			}
			if g := got.Slopes[a]; !slices.Equal(g, want) {
				t.Errorf("slopes of %s = %v, want RecentApprovedSlopes' %v", a, g, want)
			}
		}
		_, err = db.ReadForRun(ctx, lab.RunReadsQuery{Method: "no-such-method", Instrument: "ic-02", Before: before, Limit: 2})
		wantKind(t, err, lab.KindNotFound)
		_, err = db.ReadForRun(ctx, lab.RunReadsQuery{Method: m.Name, Instrument: "ic-02", Before: before, Limit: 0})
		wantKind(t, err, lab.KindInvalid)
	})
}

// TestTrendSubjects compares the index-skipping list of instruments and
// analytes with the plain GROUP BY over every curve it replaced, on runs of
// two instruments, and checks the count's cap.
func TestTrendSubjects(t *testing.T) {
	ctx := context.Background()
	db := newDB(t)
	m := mustMethod(t, db, "nitrate-ic")
	for i := range 7 {
		in, curves := runInput(m, baseTime.Add(time.Duration(i)*24*time.Hour))
		if i%3 == 0 { // another instrument, the same analytes
			in.Instrument = "ic-01"
			in.RequestHash = hashOf("ic-01|" + in.AcquiredAt.String())
		}
		if _, err := db.CreateRun(ctx, in, curves); err != nil {
			t.Fatal(err)
		}
	}
	rows, err := db.Pool.Query(ctx, `SELECT instrument, analyte, count(*)::int, max(acquired_at) FROM curves
GROUP BY instrument, analyte ORDER BY instrument, analyte`)
	if err != nil {
		t.Fatal(err)
	}
	var want []lab.TrendSubject
	for rows.Next() {
		var s lab.TrendSubject
		if err := rows.Scan(&s.Instrument, &s.Analyte, &s.Curves, &s.Last); err != nil {
			t.Fatal(err)
		}
		want = append(want, s)
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	got, err := db.TrendSubjects(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if len(want) != 4 || len(got) != len(want) {
		t.Fatalf("TrendSubjects = %+v, GROUP BY = %+v; want the same 4 pairs", got, want)
	}
	for i := range want {
		if got[i].Instrument != want[i].Instrument || got[i].Analyte != want[i].Analyte || got[i].Curves != want[i].Curves ||
			!got[i].Last.Equal(want[i].Last) || got[i].More {
			t.Errorf("pair %d: %+v, GROUP BY says %+v", i, got[i], want[i])
		}
	}
	capped, err := store.TrendSubjectsUpTo(ctx, db, 2)
	if err != nil {
		t.Fatal(err)
	}
	for i, s := range capped {
		if wantMore := want[i].Curves > 2; s.More != wantMore || s.Curves != min(want[i].Curves, 2) || !s.Last.Equal(want[i].Last) {
			t.Errorf("capped at 2, pair %d: %+v, want %d curves (more %v), last %v", i, s, min(want[i].Curves, 2), wantMore, want[i].Last)
		}
	}
}
