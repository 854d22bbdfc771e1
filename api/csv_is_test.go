package api_test

import (
	"encoding/json"
	"fmt"
	"net/http"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
)

// A run of an internal-standard analyte posted as JSON and as CSV (column
// is_response, one per row) gives the same curve and the same results:
// coefficients, checks, concentrations, uncertainties, IS checks, flags and
// release states. The data are the worked example of
// TestInternalStandardRunAndReportedValue (ratios on 0.1·c + 0.02 while
// the IS responses vary) with a replicate at L1 and a sample whose IS
// recovers 50 % (withheld).
func TestCSVISResponseSameAsJSON(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{
		"name": "lcms-drugs", "model": "linear", "weighting": "1/x",
		"analytes": []map[string]any{
			{"name": "drug-a", "unit": "ng/mL", "quant": map[string]any{"internal_standard": "drug-a-d4", "reporting_limit": 1}},
			{"name": "drug-b", "unit": "ng/mL"}}}), http.StatusCreated)
	type row struct {
		kind, analyte, level, id string
		conc, resp, is, dil      float64
	}
	var rows []row
	for i, c := range []float64{1, 2, 4, 8, 16, 32} {
		is := []float64{1000, 1100, 900, 1050, 950, 1000}[i]
		lv := fmt.Sprintf("L%d", i+1)
		rows = append(rows, row{"standard", "drug-a", lv, "", c, (0.1*c + 0.02) * is, is, 0})
		if i == 0 {
			rows = append(rows, row{"standard", "drug-a", lv, "", c, (0.1*c + 0.021) * 980, 980, 0})
		}
		rows = append(rows, row{"standard", "drug-b", lv, "", c, 3*c + 0.5 + 0.01*float64(i%2), 0, 0})
	}
	rows = append(rows,
		row{"sample", "drug-a", "", "S-1", 0, 0.82 * 1000, 1000, 5},
		row{"sample", "drug-a", "", "S-1", 0, 0.80 * 990, 990, 5},
		row{"sample", "drug-a", "", "S-2", 0, 0.82 * 500, 500, 0},
		row{"sample", "drug-b", "", "S-1", 0, 20, 0, 0})
	// JSON: group the rows as the CSV decoder does.
	var standards, samples []map[string]any
	stdAt, smpAt := map[string]int{}, map[string]int{}
	num := func(v float64) string { return fmt.Sprint(v) }
	var csv strings.Builder
	csv.WriteString("kind,analyte,level,concentration,response,sample_id,dilution,is_response\n")
	for _, r := range rows {
		is, dil := "", ""
		if r.is > 0 {
			is = num(r.is)
		}
		if r.dil > 0 {
			dil = num(r.dil)
		}
		if r.kind == "standard" {
			fmt.Fprintf(&csv, "standard,%s,%s,%s,%s,,,%s\n", r.analyte, r.level, num(r.conc), num(r.resp), is)
			k := r.analyte + "/" + r.level
			if _, ok := stdAt[k]; !ok {
				stdAt[k] = len(standards)
				standards = append(standards, map[string]any{"analyte": r.analyte, "level": r.level, "concentration": r.conc, "responses": []float64{}})
			}
			s := standards[stdAt[k]]
			s["responses"] = append(s["responses"].([]float64), r.resp)
			if r.is > 0 {
				prev, _ := s["is_responses"].([]float64)
				s["is_responses"] = append(prev, r.is)
			}
			continue
		}
		fmt.Fprintf(&csv, "sample,%s,,,%s,%s,%s,%s\n", r.analyte, num(r.resp), r.id, dil, is)
		k := r.analyte + "/" + r.id
		if _, ok := smpAt[k]; !ok {
			smpAt[k] = len(samples)
			samples = append(samples, map[string]any{"analyte": r.analyte, "id": r.id, "responses": []float64{}})
			if r.dil > 0 {
				samples[smpAt[k]]["dilution"] = r.dil
			}
		}
		s := samples[smpAt[k]]
		s["responses"] = append(s["responses"].([]float64), r.resp)
		if r.is > 0 {
			prev, _ := s["is_responses"].([]float64)
			s["is_responses"] = append(prev, r.is)
		}
	}
	at := "2026-03-06T09:00:00Z"
	jrun := e.run(t, e.admin, map[string]any{"method": "lcms-drugs", "instrument": "lcms-1", "acquired_at": at,
		"operator": "analyst-3", "standards": standards, "samples": samples})
	crun := decode[oapi.RunCreated](t, e.do(t, call{method: http.MethodPost, path: csvPath("lcms-drugs", "lcms-2", at),
		token: e.admin, contentType: "text/csv", body: []byte(csv.String())}), http.StatusCreated)
	if len(jrun.Curves) != 2 || len(crun.Curves) != 2 {
		t.Fatalf("curves %d and %d, want 2 each", len(jrun.Curves), len(crun.Curves))
	}
	same := func(what string, a, b any) {
		t.Helper()
		ja, _ := json.Marshal(a)
		jb, _ := json.Marshal(b)
		if string(ja) != string(jb) {
			t.Errorf("%s differs:\nJSON %s\nCSV  %s", what, ja, jb)
		}
	}
	for i := range jrun.Curves {
		jc := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+jrun.Curves[i].ID.String()), http.StatusOK)
		cc := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+crun.Curves[i].ID.String()), http.StatusOK)
		if jc.Analyte != cc.Analyte {
			t.Fatalf("curve %d: %s and %s", i, jc.Analyte, cc.Analyte)
		}
		same(jc.Analyte+" coefficients", jc.Coefficients, cc.Coefficients)
		same(jc.Analyte+" covariance", jc.Covariance, cc.Covariance)
		same(jc.Analyte+" checks", jc.Checks, cc.Checks)
		same(jc.Analyte+" points", jc.Points, cc.Points)
	}
	jr := decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+jrun.ID.String()+"/results"), http.StatusOK)
	cr := decode[oapi.RunResults](t, e.get(t, e.admin, "/v1/runs/"+crun.ID.String()+"/results"), http.StatusOK)
	if len(jr.Results) != 3 || len(cr.Results) != 3 {
		t.Fatalf("results %d and %d, want 3 each", len(jr.Results), len(cr.Results))
	}
	withheld := 0
	for i := range jr.Results {
		a, b := jr.Results[i], cr.Results[i]
		what := a.Analyte + " " + a.SampleID
		same(what+" sample", a.SampleID+a.Analyte, b.SampleID+b.Analyte)
		same(what+" concentration", a.Concentration, b.Concentration)
		same(what+" standard error", a.StandardError, b.StandardError)
		same(what+" interval", a.Interval, b.Interval)
		same(what+" IS check", a.InternalStandard, b.InternalStandard)
		same(what+" flags", a.Flags, b.Flags)
		same(what+" reported", a.Reported, b.Reported)
		// The reason names the result's own curve.
		same(what+" state", string(a.ReleaseState)+" "+strings.ReplaceAll(a.ReleaseReason, a.CurveID.String(), "<curve>"),
			string(b.ReleaseState)+" "+strings.ReplaceAll(b.ReleaseReason, b.CurveID.String(), "<curve>"))
		if a.ReleaseState == "withheld" {
			withheld++
		}
	}
	if withheld != 1 || cr.Results[1].InternalStandard == nil || cr.Results[1].InternalStandard.Passed {
		t.Errorf("want S-2 of drug-a withheld for its IS (50 %%), got %d withheld; %+v", withheld, cr.Results[1].InternalStandard)
	}
	if r := cr.Results[0]; r.InternalStandard == nil || len(r.Responses) != 2 {
		t.Errorf("S-1 of drug-a from CSV: IS check %+v, %d readings; want the IS check of two readings", r.InternalStandard, len(r.Responses))
	}

	// A level that gives is_response on one reading and not on the next is
	// refused at the row that differs; an IS response the rules refuse
	// (≤ 0) is named by its line and column.
	csvPost := func(body string) reply {
		return e.do(t, call{method: http.MethodPost, path: csvPath("lcms-drugs", "lcms-3", at), token: e.admin, contentType: "text/csv", body: []byte(body)})
	}
	const head = "kind,analyte,level,concentration,response,sample_id,dilution,is_response\n"
	wantProblem(t, csvPost(head+"standard,drug-a,L1,1,120,,,1000\nstandard,drug-a,L1,1,121,,,\n"), http.StatusUnprocessableEntity, "/lines/3/is_response")
	wantProblem(t, csvPost(head+"standard,drug-a,L1,1,120,,,\nstandard,drug-a,L1,1,121,,,1000\n"), http.StatusUnprocessableEntity, "/lines/3/is_response")
	var b strings.Builder
	b.WriteString(head)
	for i, c := range []float64{1, 2, 4, 8, 16, 32} {
		is := "1000"
		if i == 2 {
			is = "0"
		}
		fmt.Fprintf(&b, "standard,drug-a,L%d,%g,%g,,,%s\n", i+1, c, 100*c, is)
	}
	wantProblem(t, csvPost(b.String()), http.StatusUnprocessableEntity, "/lines/4/is_response")
	// drug-b has no internal standard: an is_response is refused there.
	wantProblem(t, csvPost(head+"standard,drug-b,L1,1,3.5,,,1000\nstandard,drug-b,L2,2,6.5,,,1000\n"), http.StatusUnprocessableEntity, "/lines/2/is_response")
}
