package api_test

import (
	"fmt"
	"math"
	"net/url"
	"strings"
	"testing"
)

type qcResult struct {
	ID            int64
	SampleID      string `json:"sample_id"`
	CurveID       string `json:"curve_id"`
	Unit          string
	Dilution      float64
	Concentration *float64
	ReleaseState  string `json:"release_state"`
	ReleaseReason string `json:"release_reason"`
}

type qcEvent struct {
	Seq           int64
	Kind          string
	Cause         string
	ReleaseState  string  `json:"release_state"`
	PreviousState *string `json:"previous_state"`
	ResultID      int64   `json:"result_id"`
	SampleID      string  `json:"sample_id"`
	CurveID       string  `json:"curve_id"`
}

// qcFeed follows the change feed as a LIMS does, limit events a page.
type qcFeed struct {
	e      *qcEnv
	token  string
	limit  int
	cursor string
	events []qcEvent
}

func (f *qcFeed) poll() []qcEvent {
	f.e.t.Helper()
	var got []qcEvent
	for {
		path := fmt.Sprintf("/v1/results?limit=%d", f.limit)
		if f.cursor != "" {
			path += "&cursor=" + url.QueryEscape(f.cursor)
		}
		var page struct {
			Events     []qcEvent
			NextCursor string `json:"next_cursor"`
			HasMore    bool   `json:"has_more"`
			Cautions   []string
		}
		qcDecode(f.e.t, f.e.must(200, "GET", path, f.token, nil), &page)
		if len(page.Cautions) == 0 {
			f.e.t.Error("feed page without cautions")
		}
		if len(page.Events) > f.limit {
			f.e.t.Fatalf("page of %d events, limit %d", len(page.Events), f.limit)
		}
		got = append(got, page.Events...)
		f.cursor = page.NextCursor
		if !page.HasMore {
			break
		}
	}
	f.events = append(f.events, got...)
	return got
}

// eventLine renders an event for comparison: sample, kind, states, cause.
func eventLine(e qcEvent) string {
	prev := "-"
	if e.PreviousState != nil {
		prev = *e.PreviousState
	}
	return fmt.Sprintf("%s %s %s>%s %s", e.SampleID, e.Kind, prev, e.ReleaseState, e.Cause)
}

func wantEvents(t *testing.T, step string, got []qcEvent, want ...string) {
	t.Helper()
	var lines []string
	for _, e := range got {
		lines = append(lines, eventLine(e))
	}
	if strings.Join(lines, "\n") != strings.Join(want, "\n") {
		t.Errorf("%s: events\n got %q\nwant %q", step, lines, want)
	}
}

func runResults(t *testing.T, e *qcEnv, token, runID string) map[string][]qcResult {
	t.Helper()
	var out struct {
		Results  []qcResult
		Cautions []string
	}
	qcDecode(t, e.must(200, "GET", "/v1/runs/"+runID+"/results", token, nil), &out)
	if len(out.Cautions) == 0 {
		t.Error("results without cautions")
	}
	bySample := map[string][]qcResult{}
	for _, r := range out.Results {
		bySample[r.SampleID] = append(bySample[r.SampleID], r)
	}
	return bySample
}

// wantState checks the state of the latest result of each sample.
func wantState(t *testing.T, step string, rs map[string][]qcResult, state string, samples ...string) {
	t.Helper()
	for _, s := range samples {
		list := rs[s]
		if len(list) == 0 {
			t.Errorf("%s: no result for %s", step, s)
			continue
		}
		if got := list[len(list)-1]; got.ReleaseState != state {
			t.Errorf("%s: %s is %s (%s), want %s", step, s, got.ReleaseState, got.ReleaseReason, state)
		}
	}
}

// TestQCLoopWholeBatch walks one invented batch on ion chromatograph ic-07
// from standards to releasable results: a curve with one bad standard
// reading fails; QA excludes the reading and the revision passes; a passing
// CCV, samples, a failing CCV that withholds a sample acquired after it,
// approval that makes the rest releasable, a passing CCV that lets later
// samples be releasable. The change feed, read two events a page as the
// batch goes on and again from the start, shows every transition once, in
// order.
func TestQCLoopWholeBatch(t *testing.T) {
	e := newQCEnv(t)
	instrument := e.token("ic-07", "runs:write")
	lims := e.token("lims", "results:read")
	qa := e.token("qa-analyst", "curves:review")
	e.must(201, "POST", "/v1/methods", e.admin, map[string]any{
		"name": "nitrate-ic", "model": "linear", "weighting": "1/x",
		"analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L"}},
	})
	feed := &qcFeed{e: e, token: lims, limit: 2}

	// 1. The run: seven levels, L4's second reading 60 % high; two samples.
	concs := []float64{0.5, 1, 2, 4, 6, 8, 10}
	var run struct {
		ID     string
		Curves []struct{ ID, Verdict string }
	}
	qcDecode(t, e.must(201, "POST", "/v1/runs", instrument, map[string]any{
		"method": "nitrate-ic", "instrument": "ic-07", "acquired_at": qcStamp(0),
		"standards": qcStandards(concs, &[2]int{3, 1}),
		"samples": []map[string]any{
			{"id": "S-01", "analyte": "nitrate", "responses": []float64{0.61}},
			{"id": "S-02", "analyte": "nitrate", "responses": []float64{1.31}, "dilution": 2},
		},
	}), &run)
	original := run.Curves[0].ID
	if run.Curves[0].Verdict != "fail" {
		t.Fatalf("curve with a bad standard: verdict %s, want fail", run.Curves[0].Verdict)
	}
	rs := runResults(t, e, lims, run.ID)
	wantState(t, "failed curve", rs, "withheld", "S-01", "S-02")
	if r := rs["S-02"][0]; r.Unit != "mg/L" || r.Dilution != 2 || r.Concentration == nil {
		t.Errorf("S-02: unit %q dilution %v concentration %v, want mg/L, 2 and a value", r.Unit, r.Dilution, r.Concentration)
	}
	wantEvents(t, "run", feed.poll(),
		"S-01 created ->withheld run.create", "S-02 created ->withheld run.create")

	// No curve is in force: the only one failed.
	_, b := e.do("GET", "/v1/instruments/ic-07/curves/current?analyte=nitrate&at="+url.QueryEscape(qcStamp(30)), lims, nil)
	if !strings.Contains(string(b), "failed its checks") {
		t.Errorf("curve in force with only a failed curve: %s", b)
	}

	// 2. QA excludes the bad reading: the revision passes.
	var rev struct {
		ID         string
		Verdict    string
		RevisionOf *string `json:"revision_of"`
		Status     string
		Exclusion  *struct{ Reason string }
		Points     []struct {
			Level    string
			Excluded bool
		}
		Cautions []string
	}
	qcDecode(t, e.must(201, "POST", "/v1/curves/"+original+"/exclusions", qa, map[string]any{
		"points": []map[string]any{{"level": "L4", "replicate": 2}}, "reason": "air bubble seen in the L4 second injection",
	}), &rev)
	if rev.Verdict != "pass" || rev.RevisionOf == nil || *rev.RevisionOf != original || rev.Status != "pending_review" ||
		rev.Exclusion == nil || len(rev.Cautions) == 0 {
		t.Fatalf("revision: %+v", rev)
	}
	excluded := 0
	for _, p := range rev.Points {
		if p.Excluded {
			excluded++
			if p.Level != "L4" {
				t.Errorf("excluded a reading of %s", p.Level)
			}
		}
	}
	if excluded != 1 {
		t.Errorf("revision excludes %d readings, want 1", excluded)
	}
	var orig struct {
		Verdict string
		Points  []struct{ Excluded bool }
	}
	qcDecode(t, e.must(200, "GET", "/v1/curves/"+original, qa, nil), &orig)
	for _, p := range orig.Points {
		if p.Excluded {
			t.Error("the original curve changed: it has an excluded reading")
		}
	}
	rs = runResults(t, e, lims, run.ID)
	wantState(t, "revision", rs, "provisional", "S-01", "S-02")
	if got := rs["S-01"][0]; got.ReleaseState != "withheld" || !strings.Contains(got.ReleaseReason, "superseded") {
		t.Errorf("S-01 against the original: %s (%s), want withheld as superseded", got.ReleaseState, got.ReleaseReason)
	}
	if c1, c2 := rs["S-02"][1].Concentration, rs["S-01"][1].Concentration; c1 == nil || c2 == nil {
		t.Error("revision results without concentrations")
	} else {
		// S-02 = 2 × (1.31 − b0)/b1 and S-01 = (0.61 − b0)/b1 on the same line, so
		// S-02/2 − S-01 = 0.7/b1, and b1 ≈ 0.2 on the invented line: ≈ 3.5.
		if got := *c1/2 - *c2; math.Abs(got-3.5) > 0.1 {
			t.Errorf("S-02/2 − S-01 = %v, want ≈ 3.5 (dilution applied after inversion)", got)
		}
	}
	wantEvents(t, "exclusion", feed.poll(),
		"S-01 created ->provisional curve.exclusion", "S-02 created ->provisional curve.exclusion")

	// 3. A passing CCV at 08:30, samples at 08:40 and 08:45, a sample at 08:55.
	var ccv struct {
		Verification struct {
			Passed        bool
			DifferencePct *float64 `json:"difference_pct"`
			LimitPct      float64  `json:"limit_pct"`
			Source        string
		}
		ResultsChanged int `json:"results_changed"`
		Cautions       []string
	}
	qcDecode(t, e.must(201, "POST", "/v1/curves/"+rev.ID+"/verifications", instrument, map[string]any{
		"level": "CCV-5", "concentration": 5, "responses": []float64{(0.01 + 0.2*5) * 1.02}, "kind": "continuing", "acquired_at": qcStamp(30),
	}), &ccv)
	if !ccv.Verification.Passed || ccv.Verification.LimitPct != 20 || ccv.Verification.DifferencePct == nil ||
		math.Abs(*ccv.Verification.DifferencePct-2) > 0.5 || len(ccv.Cautions) == 0 {
		t.Errorf("CCV 2 %% high: %+v, want passed, ≈ 2 %%D, limit 20", ccv)
	}
	addSamples := func(samples ...map[string]any) {
		t.Helper()
		e.must(201, "POST", "/v1/runs/"+run.ID+"/samples", instrument, map[string]any{"samples": samples})
	}
	sample := func(id string, minute int, y float64) map[string]any {
		return map[string]any{"id": id, "analyte": "nitrate", "responses": []float64{y}, "acquired_at": qcStamp(minute)}
	}
	addSamples(sample("S-03", 40, 0.9), sample("S-04", 45, 1.5))
	addSamples(sample("S-05", 55, 1.1))
	wantEvents(t, "samples", feed.poll(),
		"S-03 created ->provisional samples.add", "S-04 created ->provisional samples.add",
		"S-05 created ->provisional samples.add")

	// 4. A CCV measured at 08:50 reads 30 % high: S-05, acquired after it, is
	// withheld; S-03 and S-04, acquired before, are not.
	qcDecode(t, e.must(201, "POST", "/v1/curves/"+rev.ID+"/verifications", instrument, map[string]any{
		"level": "CCV-5", "concentration": 5, "responses": []float64{(0.01 + 0.2*5) * 1.3}, "kind": "continuing", "acquired_at": qcStamp(50),
	}), &ccv)
	if ccv.Verification.Passed || ccv.ResultsChanged != 1 {
		t.Errorf("CCV 30 %% high: passed %v, results changed %d; want failed, 1", ccv.Verification.Passed, ccv.ResultsChanged)
	}
	addSamples(sample("S-06", 60, 1.2))
	rs = runResults(t, e, lims, run.ID)
	wantState(t, "failed CCV", rs, "withheld", "S-05", "S-06")
	wantState(t, "failed CCV", rs, "provisional", "S-01", "S-02", "S-03", "S-04")
	if r := rs["S-05"][0].ReleaseReason; !strings.Contains(r, "verification") || !strings.Contains(r, "failed") {
		t.Errorf("S-05 reason %q does not name the failed verification", r)
	}
	wantEvents(t, "failed CCV", feed.poll(),
		"S-05 state_changed provisional>withheld curve.verification", "S-06 created ->withheld samples.add")

	// Before approval nothing is in force: the method keeps pending curves out.
	_, b = e.do("GET", "/v1/instruments/ic-07/curves/current?analyte=nitrate&at="+url.QueryEscape(qcStamp(90)), lims, nil)
	if !strings.Contains(string(b), "awaits review") {
		t.Errorf("curve in force before approval: %s", b)
	}

	// 5. QA approves the revision: the results not held by QC become releasable.
	// A second reviewer approves: the one that made the revision may not
	// (the four-eyes rule).
	qa2 := e.token("qa-second", "curves:review")
	e.must(200, "POST", "/v1/curves/"+rev.ID+"/review", qa2, map[string]any{"decision": "approve"})
	rs = runResults(t, e, lims, run.ID)
	wantState(t, "approval", rs, "releasable", "S-01", "S-02", "S-03", "S-04")
	wantState(t, "approval", rs, "withheld", "S-05", "S-06")
	wantEvents(t, "approval", feed.poll(),
		"S-01 state_changed provisional>releasable curve.review", "S-02 state_changed provisional>releasable curve.review",
		"S-03 state_changed provisional>releasable curve.review", "S-04 state_changed provisional>releasable curve.review")

	// 6. A passing CCV at 09:10; a sample at 09:15 is releasable at once.
	e.must(201, "POST", "/v1/curves/"+rev.ID+"/verifications", instrument, map[string]any{
		"level": "CCV-5", "concentration": 5, "responses": []float64{0.01 + 0.2*5}, "kind": "continuing", "acquired_at": qcStamp(70),
	})
	addSamples(sample("S-07", 75, 0.8))
	rs = runResults(t, e, lims, run.ID)
	wantState(t, "after passing CCV", rs, "releasable", "S-07")
	wantState(t, "after passing CCV", rs, "withheld", "S-05", "S-06")
	wantEvents(t, "last sample", feed.poll(), "S-07 created ->releasable samples.add")

	// The whole feed read again from the start, two a page, is the same list:
	// nothing missed, nothing repeated, in order.
	again := &qcFeed{e: e, token: lims, limit: 2}
	again.poll()
	if len(again.events) != len(feed.events) {
		t.Fatalf("re-read %d events, followed %d", len(again.events), len(feed.events))
	}
	seen := map[int64]bool{}
	for i, ev := range again.events {
		if ev != feed.events[i] && eventLine(ev) != eventLine(feed.events[i]) {
			t.Errorf("event %d: re-read %s, followed %s", i, eventLine(ev), eventLine(feed.events[i]))
		}
		if seen[ev.Seq] || (i > 0 && ev.Seq <= again.events[i-1].Seq) {
			t.Errorf("event %d: seq %d repeated or out of order", i, ev.Seq)
		}
		seen[ev.Seq] = true
	}
	var all struct{ Results []qcResult }
	qcDecode(t, e.must(200, "GET", "/v1/runs/"+run.ID+"/results", lims, nil), &all)
	createdFor := map[int64]int{}
	for _, ev := range again.events {
		if ev.Kind == "created" {
			createdFor[ev.ResultID]++
		}
	}
	for _, r := range all.Results {
		if createdFor[r.ID] != 1 {
			t.Errorf("result %d (%s) has %d created events, want 1", r.ID, r.SampleID, createdFor[r.ID])
		}
	}
	if len(createdFor) != len(all.Results) {
		t.Errorf("created events for %d results, the run has %d", len(createdFor), len(all.Results))
	}

	// The curve in force after approval, and a LIMS batch against it.
	var inForce struct {
		Curve            struct{ ID string }
		Basis            string
		LastVerification *struct{ Passed bool } `json:"last_verification"`
		Cautions         []string
	}
	qcDecode(t, e.must(200, "GET", "/v1/instruments/ic-07/curves/current?analyte=nitrate&at="+url.QueryEscape(qcStamp(90)), lims, nil), &inForce)
	if inForce.Curve.ID != rev.ID || inForce.LastVerification == nil || !inForce.LastVerification.Passed || len(inForce.Cautions) == 0 {
		t.Errorf("curve in force: %+v, want the revision with its passing CCV", inForce)
	}
	e.must(404, "GET", "/v1/instruments/ic-07/curves/current?analyte=nitrate&at="+url.QueryEscape(qcTime(-60).Format("2006-01-02T15:04:05Z")), lims, nil)
	var pred struct {
		CurveID string `json:"curve_id"`
		Unit    string
		Results []struct {
			Concentration *float64
			Dilution      float64
		}
		Cautions []string
	}
	qcDecode(t, e.must(200, "POST", "/v1/instruments/ic-07/predictions", lims, map[string]any{
		"analyte": "nitrate", "at": qcStamp(90), "samples": []map[string]any{{"id": "L-1", "responses": []float64{0.61}, "dilution": 10}},
	}), &pred)
	if pred.CurveID != rev.ID || pred.Unit != "mg/L" || len(pred.Results) != 1 || pred.Results[0].Dilution != 10 || len(pred.Cautions) == 0 {
		t.Errorf("batch prediction: %+v", pred)
	} else if s01 := rs["S-01"][1].Concentration; s01 != nil && math.Abs(*pred.Results[0].Concentration-10**s01) > 1e-9 {
		t.Errorf("batch prediction of S-01's response ×10 = %v, stored result ×10 = %v", *pred.Results[0].Concentration, 10**s01)
	}

	// Every result for a LIMS sample id, across curve revisions.
	var s01 struct {
		Results []qcResult
	}
	qcDecode(t, e.must(200, "GET", "/v1/samples/S-01", lims, nil), &s01)
	if len(s01.Results) != 2 || s01.Results[0].CurveID != original || s01.Results[1].CurveID != rev.ID {
		t.Errorf("S-01 results: %+v, want one per curve", s01.Results)
	}

	// The audit trails: the exclusion on the original, the verifications and
	// the review on the revision.
	var audit struct{ Events []struct{ Action string } }
	qcDecode(t, e.must(200, "GET", "/v1/curves/"+rev.ID+"/audit", qa, nil), &audit)
	actions := map[string]int{}
	for _, a := range audit.Events {
		actions[a.Action]++
	}
	if actions["curve.verification"] != 3 || actions["curve.review"] != 1 || actions["curve.create"] != 1 {
		t.Errorf("revision audit actions %v", actions)
	}
	qcDecode(t, e.must(200, "GET", "/v1/curves/"+original+"/audit", qa, nil), &audit)
	found := false
	for _, a := range audit.Events {
		found = found || a.Action == "curve.exclusion"
	}
	if !found {
		t.Error("the original's audit trail does not record the exclusion")
	}
}
