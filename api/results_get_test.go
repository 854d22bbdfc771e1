package api_test

import (
	"fmt"
	"net/http"
	"reflect"
	"testing"
	"time"

	"curvekeeper/api/oapi"
)

// TestFeedEventsCarryTheResult: a LIMS acts on a change-feed event without a
// second call: each event carries the result's value, interval, flags and
// dilution, equal to what GET /v1/results/{result_id} answers; that route
// gives the result as it stands now (the release state of the latest event).
func TestFeedEventsCarryTheResult(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	_, lims := e.token(t, "lims", "results:read")
	body := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))
	body["samples"] = []map[string]any{
		{"id": "W-1", "analyte": "nitrate", "responses": []float64{1.55, 1.57}},
		{"id": "W-2", "analyte": "nitrate", "responses": []float64{2.1}, "dilution": 10},
		{"id": "W-3", "analyte": "nitrate", "responses": []float64{9.0}}, // above the highest standard
	}
	run := e.run(t, e.admin, body)
	_, qa := e.token(t, "qa", "curves:review")
	if r := e.postJSON(t, qa, "/v1/curves/"+run.Curves[0].ID.String()+"/review", map[string]any{"decision": "approve"}); r.status != http.StatusOK {
		t.Fatalf("approve: %s", r)
	}

	feed := decode[oapi.ResultFeed](t, e.get(t, lims, "/v1/results?limit=50"), http.StatusOK)
	if len(feed.Events) < 6 {
		t.Fatalf("feed holds %d events, want 3 created and 3 state changes", len(feed.Events))
	}
	latest := map[int64]oapi.ResultEvent{}
	for _, ev := range feed.Events {
		rec := decode[oapi.ResultRecord](t, e.get(t, lims, fmt.Sprintf("/v1/results/%d", ev.ResultID)), http.StatusOK)
		r := rec.Result
		if r.ID != ev.ResultID || r.SampleID != ev.SampleID || !reflect.DeepEqual(r.Concentration, ev.Concentration) ||
			r.Dilution != ev.Dilution || !reflect.DeepEqual(r.Interval, ev.Interval) || r.IntervalMethod != ev.IntervalMethod ||
			!reflect.DeepEqual(r.Flags, ev.Flags) || !reflect.DeepEqual(r.StandardError, ev.StandardError) || !r.AcquiredAt.Equal(ev.AcquiredAt.Time) {
			t.Errorf("event %d of %s differs from its result:\nevent  %+v\nresult %+v", ev.Seq, ev.SampleID, ev, r)
		}
		if len(rec.Cautions) == 0 {
			t.Error("a result without the cautions")
		}
		latest[ev.ResultID] = ev
	}
	for id, ev := range latest {
		r := decode[oapi.ResultRecord](t, e.get(t, lims, fmt.Sprintf("/v1/results/%d", id)), http.StatusOK).Result
		if r.ReleaseState != ev.ReleaseState {
			t.Errorf("result %d is %s now, its latest event says %s", id, r.ReleaseState, ev.ReleaseState)
		}
		switch ev.SampleID {
		case "W-2":
			if ev.Dilution != 10 {
				t.Errorf("W-2's event dilution %v, want 10", ev.Dilution)
			}
		case "W-3":
			if len(ev.Flags) == 0 {
				t.Errorf("W-3 (above the highest standard) has no flag on its event: %+v", ev)
			}
		}
	}

	// The route's parameter: unknown, out of range, not a number.
	wantProblem(t, e.get(t, lims, "/v1/results/9007199254740991"), http.StatusNotFound, "path:result_id")
	wantProblem(t, e.get(t, lims, "/v1/results/0"), http.StatusBadRequest, "path:result_id")
	wantProblem(t, e.get(t, lims, "/v1/results/W-1"), http.StatusBadRequest, "path:result_id")
}

// TestInstrumentPredictionBatch: several analytes in one request, each
// against its curve in force, answer exactly what the single-analyte route
// answers for each; an analyte without a curve in force refuses the whole
// request, naming its entry; the samples of all entries count together.
func TestInstrumentPredictionBatch(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "anions-ic", "nitrate", "nitrite")
	_, lims := e.token(t, "lims", "results:read")
	run := e.run(t, e.admin, runBody("anions-ic", "photometer-7", baseTime, standards("nitrate", 1), standards("nitrite", 2)))
	_, qa := e.token(t, "qa", "curves:review")
	for _, c := range run.Curves {
		if r := e.postJSON(t, qa, "/v1/curves/"+c.ID.String()+"/review", map[string]any{"decision": "approve"}); r.status != http.StatusOK {
			t.Fatalf("approve: %s", r)
		}
	}
	at := baseTime.Add(time.Hour).Format(time.RFC3339)
	nitrate := []map[string]any{{"id": "W-1", "responses": []float64{1.55, 1.57}}, {"id": "W-2", "responses": []float64{2.1}, "dilution": 5}}
	nitrite := []map[string]any{{"id": "W-1", "responses": []float64{0.8}}}
	batch := decode[oapi.PredictionBatchResponse](t, e.postJSON(t, lims, "/v1/instruments/photometer-7/predictions/batch", map[string]any{
		"at": at, "confidence": 0.9, "analytes": []map[string]any{{"analyte": "nitrate", "samples": nitrate}, {"analyte": "nitrite", "samples": nitrite}}}), http.StatusOK)
	if len(batch.Predictions) != 2 || len(batch.Cautions) == 0 {
		t.Fatalf("batch = %+v", batch)
	}
	for i, c := range []struct {
		analyte string
		samples []map[string]any
	}{{"nitrate", nitrate}, {"nitrite", nitrite}} {
		one := decode[oapi.PredictionResponse](t, e.postJSON(t, lims, "/v1/instruments/photometer-7/predictions", map[string]any{
			"analyte": c.analyte, "at": at, "confidence": 0.9, "samples": c.samples}), http.StatusOK)
		if !reflect.DeepEqual(one, batch.Predictions[i]) {
			t.Errorf("entry %d (%s):\nbatch  %+v\nsingle %+v", i, c.analyte, batch.Predictions[i], one)
		}
	}
	wantProblem(t, e.postJSON(t, lims, "/v1/instruments/photometer-7/predictions/batch", map[string]any{
		"at": at, "analytes": []map[string]any{{"analyte": "nitrate", "samples": nitrate}, {"analyte": "sulfate", "samples": nitrite}}}),
		http.StatusNotFound, "/analytes/1/analyte")
	many := make([]map[string]any, 600)
	for i := range many {
		many[i] = map[string]any{"id": fmt.Sprintf("S-%d", i), "responses": []float64{1}}
	}
	wantProblem(t, e.postJSON(t, lims, "/v1/instruments/photometer-7/predictions/batch", map[string]any{
		"at": at, "analytes": []map[string]any{{"analyte": "nitrate", "samples": many}, {"analyte": "nitrite", "samples": many}}}),
		http.StatusUnprocessableEntity, "/analytes")
}
