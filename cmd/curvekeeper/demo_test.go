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
	"time"

	"curvekeeper/api"
	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

// demoClock is the fixed clock of the DB-backed demo test: a Friday, so the
// newest runs are of the day before and the week before holds a weekend.
var demoClock = time.Date(2026, 3, 6, 16, 45, 0, 0, time.UTC)

// TestDemo loads the invented scenario twice with an injected clock: the
// first load stores every run with the failures the scenario promises and
// prints their ids; the second stores nothing new, prints the same ids and
// replaces the demo's tokens instead of piling up new ones.
func TestDemo(t *testing.T) {
	url := dbtest.NewURL(t)
	var out strings.Builder
	ctx := context.Background()
	clock := func() time.Time { return demoClock }
	args := []string{"--database-url", url}
	if err := demoCmd(ctx, args, func(string) string { return "" }, clock, &out, io.Discard); err != nil {
		t.Fatalf("demo: %v", err)
	}
	first := out.String()
	if !strings.Contains(first, "Loaded 30 runs") || !strings.Contains(first, "export QA=ck_") {
		t.Fatalf("demo output lacks the load summary or the tokens:\n%s", first)
	}
	// The printed example run is stamped with the injected clock.
	if !strings.Contains(first, "acquired_at=2026-03-06T16:45:00Z") {
		t.Errorf("the example CSV post does not carry the injected clock's time:\n%s", first)
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
	if n := count(`SELECT count(*) FROM runs`); n != 30+demoImmunoPlates+demoLCMSBatches {
		t.Errorf("runs = %d, want %d", n, 30+demoImmunoPlates+demoLCMSBatches)
	}
	checkDemoLCMS(t, first, count)
	// The demo lab's certificates and stocks (demo_uncert.go): every run
	// names the stocks of its analytes, all in date at the run.
	if n := count(`SELECT count(*) FROM standard_materials`); n != 7 {
		t.Errorf("standard materials = %d, want 7", n)
	}
	// The nitrate QC history: an ICV and a CCV on each of the 9 passing
	// UV-Vis curves and the certified control on every other one; the newest
	// nitrate results took U as the larger of the budget and the top-down
	// estimate from that history.
	if n := count(`SELECT count(*) FROM verifications WHERE material = $1`, demoNitrateQCMaterial); n != 5 {
		t.Errorf("verifications of %s = %d, want 5", demoNitrateQCMaterial, n)
	}
	if n := count(`SELECT count(*) FROM sample_results WHERE analyte = 'NO3-N' AND uncertainty->>'approach' = 'larger'
		AND uncertainty->'top_down'->>'source' = 'history' AND (uncertainty->'top_down'->'history'->>'recoveries')::int >= 20`); n == 0 {
		t.Errorf("no nitrate result took the top-down estimate from a history of at least 20 recoveries")
	}
	td, err := lab.NewService(db, lab.WithClock(clock)).TopDown(ctx, demoNitrate, "NO3-N", time.Time{}, time.Time{})
	if err != nil {
		t.Fatalf("top-down of the demo's nitrate: %v", err)
	}
	if td.Estimate.QCCount != 23 || td.Estimate.CRMCount != 5 || len(td.Notes) != 0 {
		t.Errorf("demo nitrate top-down from %d recoveries and %d CRM results (notes %q), want 23 and 5 without a note",
			td.Estimate.QCCount, td.Estimate.CRMCount, td.Notes)
	}
	t.Logf("demo nitrate top-down: u(Rw) %.4f, RMS bias %.4f, u(Cref) %.4f, u_c %.4f, U %.4f", td.Estimate.URw,
		td.Estimate.RMSBias, td.Estimate.URef, td.Estimate.Combined, td.Estimate.Expanded)
	if !strings.Contains(first, "/v1/methods/"+demoNitrate+"/top-down?analyte=NO3-N") {
		t.Errorf("demo does not print the top-down route:\n%s", first)
	}
	if n := count(`SELECT count(DISTINCT run_id) FROM run_standard_materials`); n != 30 {
		t.Errorf("runs naming their standard materials = %d, want 30", n)
	}
	if n := count(`SELECT count(*) FROM curves WHERE 'standards_in_date' = ANY(failed_checks)`); n != 0 {
		t.Errorf("%d demo curves failed standards_in_date", n)
	}
	// Nitrate results carry their budget and a conformity statement with
	// the invented limit under the guard band; demo prints their run.
	if n := count(`SELECT count(*) FROM sample_results WHERE analyte = 'NO3-N' AND uncertainty->'conformity'->>'rule' = 'guard_band_u'
		AND (uncertainty->'conformity'->>'upper')::float8 = $1 AND jsonb_array_length(uncertainty->'terms') = 3`, demoNitrateLimit); n == 0 {
		t.Errorf("no nitrate result carries a three-term budget and a guard-band conformity statement")
	}
	if n := count(`SELECT count(*) FROM sample_results WHERE analyte NOT IN ('NO3-N', 'marker-K') AND uncertainty IS NOT NULL`); n != 0 {
		t.Errorf("%d results of analytes without an uncertainty spec carry a budget", n)
	}
	// marker-K's plates carry the calibration term; results towards the
	// upper asymptote get the automatic Monte Carlo check, which reports
	// its own interval there.
	if n := count(`SELECT count(*) FROM sample_results WHERE analyte = 'marker-K' AND uncertainty IS NULL`); n != 0 {
		t.Errorf("%d marker-K results carry no budget", n)
	}
	if !strings.Contains(first, `"responses":[2.3,2.346]`) {
		t.Errorf("demo does not print the prediction towards the upper asymptote:\n%s", first)
	}
	if !strings.Contains(first, "Accept: application/fhir+json") || !strings.Contains(first, "nitrate results with their uncertainty budget") {
		t.Errorf("demo does not print the nitrate results' budget and FHIR commands:\n%s", first)
	}
	// The runs lie in the four weeks before the clock's date (2026-02-06 to 2026-03-05).
	if n := count(`SELECT count(*) FROM runs WHERE acquired_at >= '2026-03-06T00:00:00Z' OR acquired_at < '2026-02-06T00:00:00Z'`); n != 0 {
		t.Errorf("%d runs lie outside the four weeks before the injected clock's date", n)
	}
	// The saturating nitrate run fails linearity; the mis-pipetted arsenic
	// run fails too; and demo printed the ids of exactly those curves.
	curved := demoPrintedID(t, first, "nitrate, fails linearity")
	badStd := demoPrintedID(t, first, "arsenic, mis-pipetted standard")
	if n := count(`SELECT count(*) FROM curves WHERE analyte = 'NO3-N' AND verdict = 'fail' AND 'mandel' = ANY(failed_checks)`); n != 1 {
		t.Errorf("nitrate curves failing Mandel's test = %d, want 1", n)
	}
	if n := count(`SELECT count(*) FROM curves WHERE id = $1 AND analyte = 'NO3-N' AND verdict = 'fail' AND 'mandel' = ANY(failed_checks)`, curved); n != 1 {
		t.Errorf("printed nitrate curve %s is not the one failing Mandel's test", curved)
	}
	if n := count(`SELECT count(*) FROM curves WHERE analyte = 'As' AND verdict = 'fail'`); n != 1 {
		t.Errorf("failing arsenic curves = %d, want 1", n)
	}
	if n := count(`SELECT count(*) FROM curves WHERE id = $1 AND analyte = 'As' AND verdict = 'fail'`, badStd); n != 1 {
		t.Errorf("printed arsenic curve %s is not the failing arsenic curve", badStd)
	}
	// The printed saturated plate is the one whose precision profile fails.
	saturated := demoPrintedID(t, first, "marker-K plate whose top calibrator saturates")
	if n := count(`SELECT count(*) FROM curves WHERE id = $1 AND model = '4pl' AND 'precision_profile' = ANY(failed_checks)`, saturated); n != 1 {
		t.Errorf("printed plate %s is not the saturated 4PL plate", saturated)
	}
	if !strings.Contains(first, "/v1/trends?instrument="+demoICPMS+"&analyte=Pb&parameter=slope") {
		t.Errorf("demo does not print the lead slope trend:\n%s", first)
	}
	// The ICP-MS loses sensitivity: the last lead slope is well below the first.
	var firstB1, lastB1 float64
	if err := db.Pool.QueryRow(ctx, `SELECT
		(SELECT slope FROM curves WHERE analyte = 'Pb' ORDER BY acquired_at LIMIT 1),
		(SELECT slope FROM curves WHERE analyte = 'Pb' ORDER BY acquired_at DESC LIMIT 1)`).Scan(&firstB1, &lastB1); err != nil {
		t.Fatal(err)
	}
	if lastB1 > 0.95*firstB1 {
		t.Errorf("Pb slope fell from %.1f to %.1f; the scenario promises a loss of more than 5 %%", firstB1, lastB1)
	}
	// The QA round approved passing curves older than a week by the injected clock, and none newer.
	cutoff := demoClock.AddDate(0, 0, -7)
	if n := count(`SELECT count(*) FROM curves WHERE status = 'approved'`); n == 0 {
		t.Errorf("no curve was approved by the demo's QA round")
	}
	if n := count(`SELECT count(*) FROM curves WHERE status = 'approved' AND acquired_at >= $1`, cutoff); n != 0 {
		t.Errorf("%d curves of the last week before the clock were approved", n)
	}
	if n := count(`SELECT count(*) FROM curves WHERE status <> 'approved' AND verdict = 'pass' AND acquired_at < $1`, cutoff); n != 0 {
		t.Errorf("%d passing curves older than a week were left unreviewed", n)
	}
	// The loss shows on the trend chart: the Westgard reject rules flag the
	// lead slope of the ICP-MS against its approved baseline.
	if rules := demoTrendRejects(t, ctx, db); len(rules) == 0 {
		t.Errorf("the Pb slope trend of %s has no reject-rule violation", demoICPMS)
	} else {
		t.Logf("Pb slope trend: reject rules %v", rules)
	}
	if n := count(`SELECT count(*) FROM tokens WHERE created_by = 'demo' AND revoked_at IS NULL`); n != 4 {
		t.Errorf("live demo tokens after the first demo = %d, want 4", n)
	}
	oldAdmin := demoPrintedSecret(t, first, "ADMIN")

	out.Reset()
	if err := demoCmd(ctx, args, func(string) string { return "" }, clock, &out, io.Discard); err != nil {
		t.Fatalf("second demo: %v", err)
	}
	second := out.String()
	if !strings.Contains(second, "loaded before") {
		t.Errorf("second load did not say the runs were there:\n%s", second)
	}
	if n := count(`SELECT count(*) FROM runs`); n != 30+demoImmunoPlates+demoLCMSBatches {
		t.Errorf("runs after a second load = %d, want %d", n, 30+demoImmunoPlates+demoLCMSBatches)
	}
	if got := demoPrintedID(t, second, "analyte-T of the batch whose mid-batch CCV fails:"); got != demoPrintedID(t, first, "analyte-T of the batch whose mid-batch CCV fails:") {
		t.Errorf("second demo printed another failing LC-MS/MS curve %s", got)
	}
	if got := demoPrintedID(t, second, "marker-K plate whose top calibrator saturates"); got != saturated {
		t.Errorf("second demo printed the saturated plate %s, the first %s", got, saturated)
	}
	if got := demoPrintedID(t, second, "nitrate, fails linearity"); got != curved {
		t.Errorf("second demo prints nitrate curve %s, the first printed %s", got, curved)
	}
	if got := demoPrintedID(t, second, "arsenic, mis-pipetted standard"); got != badStd {
		t.Errorf("second demo prints arsenic curve %s, the first printed %s", got, badStd)
	}
	// Tokens: the four of the first demo are revoked, four new ones are live, and the output says so.
	if n := count(`SELECT count(*) FROM tokens WHERE created_by = 'demo' AND revoked_at IS NULL`); n != 4 {
		t.Errorf("live demo tokens after the second demo = %d, want 4", n)
	}
	if n := count(`SELECT count(*) FROM tokens WHERE created_by = 'demo' AND revoked_at IS NOT NULL`); n != 4 {
		t.Errorf("revoked demo tokens after the second demo = %d, want 4", n)
	}
	if !strings.Contains(second, "Revoked the 4 tokens an earlier demo issued (demo-admin, demo-instrument, demo-lims, demo-qa)") {
		t.Errorf("second demo does not say it revoked the earlier tokens:\n%s", second)
	}
	if strings.Contains(first, "Revoked") {
		t.Errorf("first demo claims to have revoked tokens:\n%s", first)
	}
	if _, err := db.LookupToken(ctx, oldAdmin); err == nil {
		t.Errorf("the first demo's admin token still works after the second demo")
	}
	if _, err := db.LookupToken(ctx, demoPrintedSecret(t, second, "ADMIN")); err != nil {
		t.Errorf("the second demo's admin token does not work: %v", err)
	}
}

// demoPrintedID returns the curve id demo printed on the line starting with label.
func demoPrintedID(t *testing.T, out, label string) string {
	t.Helper()
	for _, line := range strings.Split(out, "\n") {
		if rest, ok := strings.CutPrefix(strings.TrimSpace(line), label); ok {
			f := strings.Fields(rest)
			if len(f) > 0 && len(f[len(f)-1]) == 36 {
				return f[len(f)-1]
			}
		}
	}
	t.Fatalf("demo printed no curve id for %q:\n%s", label, out)
	return ""
}

// demoPrintedSecret returns the secret of "export NAME=" in demo's output.
func demoPrintedSecret(t *testing.T, out, name string) string {
	t.Helper()
	for _, line := range strings.Split(out, "\n") {
		if v, ok := strings.CutPrefix(strings.TrimSpace(line), "export "+name+"="); ok {
			return v
		}
	}
	t.Fatalf("demo printed no %s token:\n%s", name, out)
	return ""
}

// demoTrendRejects asks GET /v1/trends for the Pb slope of the ICP-MS and
// returns the reject rules it reports.
func demoTrendRejects(t *testing.T, ctx context.Context, db *store.DB) []string {
	t.Helper()
	srv, err := api.New(api.Config{}, lab.NewService(db), slog.New(slog.NewTextHandler(io.Discard, nil)))
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
