package api_test

import (
	"bytes"
	"net/http"
	"strings"
	"testing"
	"time"
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
	e, h := newBenchServer(b)
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
	send, sink := benchPredictSender(b, h, lims, benchPredictionBody())
	// Warm both curves (curve, status and budget context cached) and check
	// that only the budget curve answers with budgets.
	send(plain.Curves[0].ID.String())
	plainLen := sink.Len()
	if bytes.Contains(sink.Bytes(), []byte(`"uncertainty"`)) {
		b.Fatal("the plain curve answered with a budget")
	}
	send(budget.Curves[0].ID.String())
	budgetAnswer := sink.String()
	if !strings.Contains(budgetAnswer, `"conformity"`) {
		b.Fatalf("the budget curve answered without a budget and conformity: %s", budgetAnswer)
	}
	// Monte Carlo runs by itself only where the GUM screen puts a result in
	// doubt; this well-determined line must not be screened, or the
	// benchmark would time simulations.
	if strings.Contains(budgetAnswer, `"monte_carlo"`) {
		b.Fatalf("the benchmark's samples were screened for Monte Carlo: %s", budgetAnswer)
	}
	cpu := alternatingCPU(b, 6, send, plain.Curves[0].ID.String(), budget.Curves[0].ID.String())
	b.ReportMetric(cpu[0], "plain-cpu-ns/op")
	b.ReportMetric(cpu[1], "budget-cpu-ns/op")
	b.ReportMetric(cpu[1]/cpu[0], "budget/plain")
	b.ReportMetric(float64(len(budgetAnswer))/float64(plainLen), "body-budget/plain")
}
