package api_test

import (
	"fmt"
	"math"
	"net/http"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
)

// Blanks, carry-over and blank subtraction judged in the service, worked by
// hand. The standards' ratios A_x/A_is lie on 0.1·c (IS 1000 on every
// standard), so a ratio r reads x̂0 = 10·r ng/mL:
//
//	pos 1–6 standards 1, 2, 4, 8, 16, 32 ng/mL (responses 100 … 3200)
//	pos 7   double blank after the highest standard: analyte 15, IS 40
//	        carry-over (ICH M10 §3.2.6): 15 ≤ 20 % of the LLOQ response 100
//	        (15 %), IS 40 ≤ 5 % of the IS mean 1000 (4 %): passes
//	pos 8   ICV 5 ng/mL: 500/1000 → 5, 100 %
//	pos 9   method blank MB1: 30/1000 → 0.3 ng/mL ≤ the reporting limit 0.5
//	pos 10  method blank MB2: 10/1000 → 0.1 ng/mL ≤ 0.5
//	pos 11  sample S1: 520/1000 → x̂0 5.2; mean method blank (0.3 + 0.1)/2
//	        = 0.2 subtracted: net 5.0
//	pos 12  CCV 5 ng/mL: 100 %
//
// A second run with a carry-over blank of 25 (25 % > 20 %) and MB1 reading
// 80/1000 → 0.8 > 0.5 fails both checks (noted on S1; the mean blank is
// (0.8 + 0.1)/2 = 0.45, net 4.75); with the limit 0.2 × LLOQ (1 ng/mL) the
// first run's MB1 (0.3) fails instead.
func TestBlanksAndCarryOverJudgedHere(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	method := func(name string, quant map[string]any) {
		q := map[string]any{"internal_standard": "drug-a-d4", "blank_subtraction": "mean_method_blank"}
		for k, v := range quant {
			q[k] = v
		}
		decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": name, "model": "linear", "weighting": "none",
			"analytes": []map[string]any{{"name": "drug-a", "unit": "ng/mL", "quant": q}}}), http.StatusCreated)
	}
	method("lcms-rl", map[string]any{"reporting_limit": 0.5})
	method("lcms-lloq", map[string]any{"reporting_limit": 0.5, "blank_limit_fraction_of_lloq": 0.2})
	post := func(method string, hour int, carry, mb1 float64) oapi.SampleResult {
		t.Helper()
		var standards, injections []map[string]any
		for i, c := range []float64{1, 2, 4, 8, 16, 32} {
			lv := "L" + string(rune('1'+i))
			standards = append(standards, map[string]any{"analyte": "drug-a", "level": lv, "concentration": c,
				"responses": []float64{100 * c}, "is_responses": []float64{1000}})
			injections = append(injections, map[string]any{"position": i + 1, "kind": "calibration_standard", "id": lv})
		}
		check := func(pos int, kind, id string, nominal, resp float64) map[string]any {
			m := map[string]any{"position": pos, "kind": kind, "id": id, "analyte": "drug-a", "responses": []float64{resp}, "is_responses": []float64{1000}}
			if nominal > 0 {
				m["nominal"] = nominal
			}
			return m
		}
		injections = append(injections,
			map[string]any{"position": 7, "kind": "calibration_blank", "id": "DB", "analyte": "drug-a", "judged": "pass",
				"responses": []float64{carry}, "is_responses": []float64{40}},
			check(8, "icv", "ICV", 5, 500), check(9, "method_blank", "MB1", 0, mb1), check(10, "method_blank", "MB2", 0, 10),
			map[string]any{"position": 11, "kind": "sample", "id": "S1"}, check(12, "ccv", "CCV", 5, 500))
		run := e.run(t, e.admin, map[string]any{"method": method, "instrument": "lcms-1",
			"acquired_at": fmt.Sprintf("2026-03-06T%02d:00:00Z", hour), "standards": standards,
			"samples":  []map[string]any{{"id": "S1", "analyte": "drug-a", "responses": []float64{520}, "is_responses": []float64{1000}}},
			"sequence": map[string]any{"complete": true, "injections": injections}})
		res := decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+run.ID.String()+"/results"), http.StatusOK)
		if len(res.Results) != 1 || res.Results[0].Sequence == nil {
			t.Fatalf("results %+v", res.Results)
		}
		return res.Results[0]
	}
	near := func(what string, got, want float64) {
		t.Helper()
		if math.Abs(got-want) > 1e-9 {
			t.Errorf("%s = %.12g, want %g (worked by hand)", what, got, want)
		}
	}
	blank := func(r oapi.SampleResult, id string) (value, limit float64, passed bool) {
		t.Helper()
		for _, c := range r.Sequence.Checks {
			if c.ID == id {
				if c.Value == nil || c.Limit == nil {
					t.Fatalf("%s has no value or limit: %+v", id, c)
				}
				return *c.Value, *c.Limit, c.Passed
			}
		}
		t.Fatalf("no check %s in %+v", id, r.Sequence.Checks)
		return
	}

	r := post("lcms-rl", 8, 15, 30)
	co, bc := r.Sequence.CarryOver, r.Sequence.BlankCorrection
	if co == nil || !co.Evaluated || !co.Passed || !co.IsEvaluated || co.HighestStandard != 6 || co.BlankPosition != 7 {
		t.Fatalf("carry-over %+v, want evaluated and passed at the blank 7 after the standard 6", co)
	}
	near("carry-over analyte %", co.AnalytePct, 15)
	near("carry-over analyte limit", co.AnalyteLimit, 20)
	near("carry-over IS %", co.IsPct, 4)
	near("carry-over IS limit", co.IsLimit, 50)
	v, l, ok := blank(r, "MB1")
	near("MB1", v, 0.3)
	near("MB1 limit", l, 0.5)
	if !ok {
		t.Error("MB1 0.3 failed the reporting limit 0.5")
	}
	if bc == nil || bc.Policy != "mean_method_blank" || !bc.Applied || bc.Blanks != 2 {
		t.Fatalf("blank correction %+v, want the mean of two method blanks applied", bc)
	}
	near("S1 x̂0", bc.X0, 5.2)
	near("mean method blank", bc.Value, 0.2)
	near("S1 net", bc.Net, 5.0)
	near("S1 concentration (as measured)", *r.Concentration, 5.2)
	if !strings.Contains(bc.Statement, "2 method blank") {
		t.Errorf("statement %q does not say what was subtracted", bc.Statement)
	}
	for _, n := range r.Sequence.Notes {
		if strings.Contains(n, "carry-over") || strings.Contains(n, "exceeds its limit") {
			t.Errorf("note %q on a passing batch", n)
		}
	}

	r = post("lcms-rl", 9, 25, 80)
	co, bc = r.Sequence.CarryOver, r.Sequence.BlankCorrection
	if co == nil || co.Passed || co.AnalytePassed || !co.IsPassed {
		t.Errorf("carry-over %+v, want the analyte part failed (25 %%) and the IS part passed", co)
	}
	near("carry-over analyte % (failing)", co.AnalytePct, 25)
	if v, _, ok := blank(r, "MB1"); ok || math.Abs(v-0.8) > 1e-9 {
		t.Errorf("MB1 %v passed %v, want 0.8 failing the limit 0.5", v, ok)
	}
	near("mean method blank (failing run)", bc.Value, 0.45)
	near("S1 net (failing run)", bc.Net, 4.75)
	notes := strings.Join(r.Sequence.Notes, " | ")
	if !strings.Contains(notes, "carry-over check failed") || !strings.Contains(notes, "method blank MB1 at position 9 exceeds its limit") {
		t.Errorf("notes %q, want the carry-over and MB1 failures", notes)
	}

	r = post("lcms-lloq", 10, 15, 30)
	v, l, ok = blank(r, "MB1")
	near("MB1 limit 0.2 × LLOQ 1", l, 0.2)
	if ok || math.Abs(v-0.3) > 1e-9 {
		t.Errorf("MB1 %v passed %v against 0.2 × LLOQ", v, ok)
	}

	// A blank neither judged nor with readings is refused; so is one of an
	// IS analyte without its IS responses, and a check of an unknown analyte.
	bad := func(inj map[string]any, pointer string) {
		t.Helper()
		wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", map[string]any{"method": "lcms-rl", "instrument": "lcms-1",
			"acquired_at": "2026-03-06T11:00:00Z", "standards": []map[string]any{{"analyte": "drug-a", "level": "L1", "concentration": 1,
				"responses": []float64{100}, "is_responses": []float64{1000}}},
			"sequence": map[string]any{"complete": true, "injections": []map[string]any{inj}}}), http.StatusUnprocessableEntity, pointer)
	}
	bad(map[string]any{"position": 1, "kind": "method_blank", "id": "MB"}, "/sequence/injections/0/judged")
	bad(map[string]any{"position": 1, "kind": "method_blank", "id": "MB", "analyte": "drug-a", "responses": []float64{3}}, "/sequence/injections/0/is_responses")
	bad(map[string]any{"position": 1, "kind": "ccv", "id": "C", "analyte": "drug-z", "nominal": 5, "responses": []float64{3}}, "/sequence/injections/0/analyte")
}
