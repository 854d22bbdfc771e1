package api_test

import (
	"net/http"
	"strings"
	"testing"
	"time"
)

// BenchmarkPredictRouteTopDown compares, side by side in one run, the
// prediction route's CPU per request under approach larger with the
// top-down estimate stated ("stated") and taken from the QC history
// ("history", kept per method and analyte by the server for up to a
// minute of the injected clock, which does not move here, so every
// request after the first is served from the cache). Both curves are fitted
// on the same standards and answer the same body of 10 samples in
// duplicate; the kinds alternate in rounds of b.N requests each:
//
//	go test ./api -run '^$' -bench PredictRouteTopDown -benchtime 2000x
func BenchmarkPredictRouteTopDown(b *testing.B) {
	e, h := newBenchServer(b)
	at := time.Date(2031, 6, 1, 8, 0, 0, 0, time.UTC) // in the year before testNow
	curves := map[string]string{}
	for _, k := range []string{"stated", "history"} {
		spec := map[string]any{"terms": []string{"calibration"}, "approach": "larger", "top_down_source": k}
		if k == "stated" {
			spec["top_down_relative"] = 0.03
		}
		decode[struct{}](b, e.postJSON(b, e.admin, "/v1/methods", map[string]any{"name": "nitrate-td-" + k, "model": "linear",
			"weighting": "none", "analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L", "uncertainty": spec}}}), http.StatusCreated)
		curves[k] = e.run(b, e.admin, runBody("nitrate-td-"+k, "photometer-7", at, standards("nitrate", 1))).Curves[0].ID.String()
	}
	decode[struct{}](b, e.postJSON(b, e.admin, "/v1/standard-materials", map[string]any{"code": "CRM-TD-BENCH", "kind": "reference_material",
		"analyte": "nitrate", "unit": "mg/L", "value": 2.0, "expanded_uncertainty": 0.04, "coverage_factor": 2.0,
		"expires_at": at.AddDate(2, 0, 0).Format(time.RFC3339)}), http.StatusCreated)
	for i := range 24 {
		v := map[string]any{"kind": "continuing", "level": "CCV", "concentration": 2.0, "responses": []float64{0.0962 * (1 + 0.01*float64(i%5-2))},
			"acquired_at": at.Add(time.Duration(i+1) * time.Hour).Format(time.RFC3339)}
		if i%6 == 0 {
			v["material"] = "CRM-TD-BENCH"
		}
		decode[struct{}](b, e.postJSON(b, e.admin, "/v1/curves/"+curves["history"]+"/verifications", v), http.StatusCreated)
	}
	_, lims := e.token(b, "lims-bench", "results:read")
	send, sink := benchPredictSender(b, h, lims, benchPredictionBody())
	// Warm both (curve, status, budget context and the history cached) and
	// check each answers from its source.
	for k, curve := range curves {
		send(curve)
		if want := `"source":"` + k + `"`; !strings.Contains(sink.String(), want) {
			b.Fatalf("%s curve: the answer lacks %s: %s", k, want, sink.String())
		}
	}
	cpu := alternatingCPU(b, 6, send, curves["stated"], curves["history"])
	b.ReportMetric(cpu[0], "stated-cpu-ns/op")
	b.ReportMetric(cpu[1], "history-cpu-ns/op")
	b.ReportMetric(cpu[1]/cpu[0], "history/stated")
}
