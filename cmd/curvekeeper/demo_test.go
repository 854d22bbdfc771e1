package main

import (
	"context"
	"encoding/json"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"

	"curvekeeper/api"
	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

// TestDemo loads the invented scenario twice: the first load stores every
// run with the failures the scenario promises; the second stores nothing new.
func TestDemo(t *testing.T) {
	url := dbtest.NewURL(t)
	var out strings.Builder
	ctx := context.Background()
	if err := run(ctx, []string{"demo", "--database-url", url}, func(string) string { return "" }, &out, io.Discard); err != nil {
		t.Fatalf("demo: %v", err)
	}
	if !strings.Contains(out.String(), "Loaded 30 runs") || !strings.Contains(out.String(), "export QA=ck_") {
		t.Fatalf("demo output lacks the load summary or the tokens:\n%s", out.String())
	}
	db, err := store.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()

	count := func(sql string, args ...any) int {
		t.Helper()
		var n int
		if err := db.Pool.QueryRow(ctx, sql, args...).Scan(&n); err != nil {
			t.Fatalf("%s: %v", sql, err)
		}
		return n
	}
	if n := count(`SELECT count(*) FROM runs`); n != 30 {
		t.Errorf("runs = %d, want 30", n)
	}
	// The saturating nitrate run fails linearity; the mis-pipetted arsenic run fails too.
	if n := count(`SELECT count(*) FROM curves WHERE analyte = 'NO3-N' AND verdict = 'fail' AND 'mandel' = ANY(failed_checks)`); n < 1 {
		t.Errorf("no nitrate curve fails Mandel's test")
	}
	if n := count(`SELECT count(*) FROM curves WHERE analyte = 'As' AND verdict = 'fail'`); n < 1 {
		t.Errorf("no arsenic curve fails")
	}
	// The ICP-MS loses sensitivity: the last lead slope is well below the first.
	var first, last float64
	if err := db.Pool.QueryRow(ctx, `SELECT
		(SELECT slope FROM curves WHERE analyte = 'Pb' ORDER BY acquired_at LIMIT 1),
		(SELECT slope FROM curves WHERE analyte = 'Pb' ORDER BY acquired_at DESC LIMIT 1)`).Scan(&first, &last); err != nil {
		t.Fatal(err)
	}
	if last > 0.95*first {
		t.Errorf("Pb slope fell from %.1f to %.1f; the scenario promises a loss of more than 5 %%", first, last)
	}
	if n := count(`SELECT count(*) FROM curves WHERE status = 'approved'`); n == 0 {
		t.Errorf("no curve was approved by the demo's QA round")
	}
	// The loss shows on the trend chart: the Westgard reject rules flag the
	// lead slope of the ICP-MS against its approved baseline.
	if rules := demoTrendRejects(t, ctx, db); len(rules) == 0 {
		t.Errorf("the Pb slope trend of %s has no reject-rule violation", demoICPMS)
	} else {
		t.Logf("Pb slope trend: reject rules %v", rules)
	}

	out.Reset()
	if err := run(ctx, []string{"demo", "--database-url", url}, func(string) string { return "" }, &out, io.Discard); err != nil {
		t.Fatalf("second demo: %v", err)
	}
	if !strings.Contains(out.String(), "loaded before") {
		t.Errorf("second load did not say the runs were there:\n%s", out.String())
	}
	if n := count(`SELECT count(*) FROM runs`); n != 30 {
		t.Errorf("runs after a second load = %d, want 30", n)
	}
}

// demoTrendRejects asks GET /v1/trends for the Pb slope of the ICP-MS and
// returns the reject rules it reports.
func demoTrendRejects(t *testing.T, ctx context.Context, db *store.DB) []string {
	t.Helper()
	srv, err := api.New(api.Config{}, db, slog.New(slog.NewTextHandler(io.Discard, nil)))
	if err != nil {
		t.Fatal(err)
	}
	_, secret, err := db.CreateToken(ctx, "demo-test-qa", []string{lab.ScopeCurvesReview}, "test")
	if err != nil {
		t.Fatal(err)
	}
	req := httptest.NewRequestWithContext(ctx, http.MethodGet, "/v1/trends?instrument="+demoICPMS+"&analyte=Pb&parameter=slope", nil)
	req.Header.Set("Authorization", "Bearer "+secret)
	rec := httptest.NewRecorder()
	srv.Handler().ServeHTTP(rec, req)
	if rec.Code != http.StatusOK {
		t.Fatalf("GET /v1/trends: %d %s", rec.Code, rec.Body.String())
	}
	var tr struct {
		Baseline struct {
			N int `json:"n"`
		} `json:"baseline"`
		Violations []struct {
			Rule   string `json:"rule"`
			Reject bool   `json:"reject"`
		} `json:"violations"`
	}
	if err := json.Unmarshal(rec.Body.Bytes(), &tr); err != nil {
		t.Fatal(err)
	}
	var rules []string
	for _, v := range tr.Violations {
		if v.Reject {
			rules = append(rules, v.Rule)
		}
	}
	t.Logf("baseline of %d curves; %d violations", tr.Baseline.N, len(tr.Violations))
	return rules
}
