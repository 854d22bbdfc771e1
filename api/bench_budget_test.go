package api_test

import (
	"bytes"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"curvekeeper/api"
	"curvekeeper/lab"
	"curvekeeper/store/dbtest"
)

// BenchmarkPredictRouteBudget compares, side by side in one run, the
// prediction route's CPU per request on a curve whose method asks for no
// budget ("plain") and on the same standards under a method whose nitrate
// results carry the three-term budget with a guard-band limit ("budget";
// Monte Carlo is not asked for, and the line is not one the GUM screen
// puts in doubt). Both curves are fitted
// on the same standards and answer the same body of 10 samples in
// duplicate. The two kinds alternate in rounds of b.N requests each, so
// that drift of the shared machine falls on both; it reports each kind's
// CPU time of this process per request and their ratio:
//
//	go test ./api -run '^$' -bench PredictRouteBudget -benchtime 2000x
func BenchmarkPredictRouteBudget(b *testing.B) {
	db := dbtest.NewDB(b)
	s, err := api.New(api.Config{RateLimit: -1}, lab.NewService(db, testClock), slog.New(slog.NewJSONHandler(io.Discard, nil)))
	if err != nil {
		b.Fatal(err)
	}
	e := &env{db: db, srv: httptest.NewServer(s.Handler()), admin: bootstrapSecret}
	b.Cleanup(e.srv.Close)
	if _, _, err := db.EnsureToken(b.Context(), "bootstrap-admin", bootstrapSecret, []string{"admin"}); err != nil {
		b.Fatal(err)
	}
	e.method(b, "nitrate-plain", "nitrate")
	e.budgetMethod(b, "nitrate-budget", map[string]any{"upper": 9.0, "rule": "guard_band_u"})
	decode[struct{}](b, e.postJSON(b, e.admin, "/v1/standard-materials", map[string]any{
		"code": "CRM-BENCH", "kind": "reference_material", "analyte": "nitrate", "unit": "mg/L", "value": 1000.0,
		"expanded_uncertainty": 3.0, "coverage_factor": 2.0, "expires_at": baseTime.Add(90 * 24 * time.Hour).Format(time.RFC3339)}),
		http.StatusCreated)
	stds := standards("nitrate", 1)
	plain := e.run(b, e.admin, runBody("nitrate-plain", "photometer-7", baseTime, stds))
	withBudget := runBody("nitrate-budget", "photometer-7", baseTime, stds)
	withBudget["standard_materials"] = []string{"CRM-BENCH"}
	budget := e.run(b, e.admin, withBudget)
	_, lims := e.token(b, "lims-bench", "results:read")
	var body bytes.Buffer
	body.WriteString(`{"samples":[`)
	for i := range 10 {
		y := 0.012 + 0.0481*(1+9.5*float64(i))
		if i > 0 {
			body.WriteByte(',')
		}
		fmt.Fprintf(&body, `{"id":"bench-sample-%d","responses":[%v,%v]}`, i+1, y*0.995, y*1.005)
	}
	body.WriteString(`]}`)
	h := s.Handler()
	// The recorder writes into one reused buffer, so that the harness's own
	// copying of the (larger) budget answers is not counted as the route's.
	var sink bytes.Buffer
	send := func(curve string) *httptest.ResponseRecorder {
		req := httptest.NewRequest(http.MethodPost, "/v1/curves/"+curve+"/predictions", bytes.NewReader(body.Bytes()))
		req.Header.Set("Authorization", "Bearer "+lims)
		req.Header.Set("Content-Type", "application/json")
		w := httptest.NewRecorder()
		sink.Reset()
		w.Body = &sink
		h.ServeHTTP(w, req)
		if w.Code != http.StatusOK {
			b.Fatalf("status %d: %s", w.Code, w.Body.String())
		}
		return w
	}
	// Warm both curves (curve, status and budget context cached) and check
	// that only the budget curve answers with budgets.
	plainLen := send(plain.Curves[0].ID.String()).Body.Len()
	if bytes.Contains(sink.Bytes(), []byte(`"uncertainty"`)) {
		b.Fatal("the plain curve answered with a budget")
	}
	budgetAnswer := send(budget.Curves[0].ID.String()).Body.String()
	if !strings.Contains(budgetAnswer, `"conformity"`) {
		b.Fatalf("the budget curve answered without a budget and conformity: %s", budgetAnswer)
	}
	// Monte Carlo runs by itself only where the GUM screen puts a result in
	// doubt; this well-determined line must not be screened, or the
	// benchmark would time simulations.
	if strings.Contains(budgetAnswer, `"monte_carlo"`) {
		b.Fatalf("the benchmark's samples were screened for Monte Carlo: %s", budgetAnswer)
	}
	const rounds = 6
	var cpu [2]int64
	b.ResetTimer()
	for range rounds {
		for k, curve := range []string{plain.Curves[0].ID.String(), budget.Curves[0].ID.String()} {
			c0 := processCPU()
			for range b.N {
				send(curve)
			}
			cpu[k] += processCPU() - c0
		}
	}
	b.StopTimer()
	n := float64(rounds * b.N)
	b.ReportMetric(float64(cpu[0])/n, "plain-cpu-ns/op")
	b.ReportMetric(float64(cpu[1])/n, "budget-cpu-ns/op")
	b.ReportMetric(float64(cpu[1])/float64(cpu[0]), "budget/plain")
	b.ReportMetric(float64(len(budgetAnswer))/float64(plainLen), "body-budget/plain")
}
