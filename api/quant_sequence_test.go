package api_test

import (
	"net/http"
	"slices"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
)

// A failing CCV withholds exactly the samples since the last passing check
// (FIELD-NOTES §8: results must be bracketed by acceptable verifications,
// TNI/EPA practice). Worked by hand: the standards lie on y = 10·x, so a CCV
// of nominal 5 reading 50 recovers 100 % (passes, 90–110 %) and one reading
// 60 recovers 120 % (fails). Injection order:
//
//	1–5 standards, 6 ICV pass, 7 S1, 8 S2, 9 CCV pass, 10 S3, 11 S4,
//	12 CCV fail, 13 S5, 14 CCV pass, 15 S6, 16 CCV pass
//
// S1 and S2 keep their curve's state (bracket 6–9); S3 and S4, exactly the
// samples since the last passing check at 9, are withheld naming the failed
// CCV at 12; S5 is withheld too, for no passing verification opened its
// bracket after the failure (lab/sequence); S6 is bracketed by 14–16.
func TestSequenceFailingCCVWithholdsSinceLastPassing(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "seq-method", "analyte-x")
	var standards, injections []map[string]any
	for i, c := range []float64{1, 2, 4, 8, 16} {
		standards = append(standards, map[string]any{"analyte": "analyte-x", "level": "L" + string(rune('1'+i)),
			"concentration": c, "responses": []float64{10 * c}})
		injections = append(injections, map[string]any{"position": i + 1, "kind": "calibration_standard", "id": "L" + string(rune('1'+i))})
	}
	ccv := func(pos int, id string, reading float64) map[string]any {
		return map[string]any{"position": pos, "kind": "ccv", "id": id, "analyte": "analyte-x", "nominal": 5, "responses": []float64{reading}}
	}
	smp := func(pos int, id string) map[string]any {
		return map[string]any{"position": pos, "kind": "sample", "id": id}
	}
	icv := ccv(6, "ICV", 50)
	icv["kind"] = "icv"
	injections = append(injections, icv, smp(7, "S1"), smp(8, "S2"), ccv(9, "CCV1", 50), smp(10, "S3"), smp(11, "S4"),
		ccv(12, "CCV2", 60), smp(13, "S5"), ccv(14, "CCV3", 50), smp(15, "S6"), ccv(16, "CCV4", 50))
	var samples []map[string]any
	for _, id := range []string{"S1", "S2", "S3", "S4", "S5", "S6"} {
		samples = append(samples, map[string]any{"id": id, "analyte": "analyte-x", "responses": []float64{30}})
	}
	run := e.run(t, e.admin, map[string]any{"method": "seq-method", "instrument": "lc-2", "acquired_at": "2026-03-06T09:00:00Z",
		"standards": standards, "samples": samples, "sequence": map[string]any{"complete": true, "injections": injections}})
	res := decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+run.ID.String()+"/results"), http.StatusOK)
	var withheld, sinceLastPassing []string
	for _, r := range res.Results {
		if r.Sequence == nil {
			t.Fatalf("%s has no sequence record", r.SampleID)
		}
		if slices.Contains(r.Flags, "sequence_withheld") {
			withheld = append(withheld, r.SampleID)
			if r.ReleaseState != "withheld" || !strings.Contains(r.ReleaseReason, "CCV2 at position 12 failed") {
				t.Errorf("%s: %s %q, want withheld naming the CCV at position 12", r.SampleID, r.ReleaseState, r.ReleaseReason)
			}
			if strings.Contains(r.ReleaseReason, "since the last passing check at position 9") {
				sinceLastPassing = append(sinceLastPassing, r.SampleID)
			}
			continue
		}
		// Its release state is its curve's (this exact-line curve fails
		// checks that need scatter): the sequence adds nothing to it.
		if r.Sequence.State != "reportable" || strings.HasPrefix(r.ReleaseReason, "sequence:") {
			t.Errorf("%s: sequence state %s (%s), release %s %q, want reportable and not withheld by the sequence", r.SampleID, r.Sequence.State, r.Sequence.Reason, r.ReleaseState, r.ReleaseReason)
		}
	}
	if !slices.Equal(sinceLastPassing, []string{"S3", "S4"}) || !slices.Equal(withheld, []string{"S3", "S4", "S5"}) {
		t.Errorf("withheld %v (since the last passing check: %v), want S3, S4 since the last passing check and S5 unopened", withheld, sinceLastPassing)
	}
	brackets := map[string][2]int{}
	for _, r := range res.Results {
		brackets[r.SampleID] = [2]int{r.Sequence.Opening, r.Sequence.Closing}
	}
	if brackets["S1"] != [2]int{6, 9} || brackets["S6"] != [2]int{14, 16} {
		t.Errorf("brackets %v, want S1 6–9 and S6 14–16", brackets)
	}

	// A sequence naming a sample the run does not carry is refused.
	injections = append(injections, smp(17, "S9"))
	wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", map[string]any{"method": "seq-method", "instrument": "lc-2",
		"acquired_at": "2026-03-06T10:00:00Z", "standards": standards, "samples": samples,
		"sequence": map[string]any{"complete": true, "injections": injections}}), http.StatusUnprocessableEntity, "/sequence/injections/16/id")
}
