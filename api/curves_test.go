package api_test

import (
	"bytes"
	"encoding/json"
	"encoding/xml"
	"errors"
	"fmt"
	"image/png"
	"io"
	"math"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"curvekeeper/api/oapi"
)

// checkNames are the check names of issue 4 and the spec, in report order.
var checkNames = []string{"min_levels", "mandel", "lack_of_fit", "homoscedasticity", "back_calculation",
	"r_squared", "relative_standard_error", "intercept", "residual_runs", "outliers", "monotonic"}

func TestGetCurve(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	run := e.nitrateCurve(t)
	r := e.get(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String())
	c := decode[oapi.Curve](t, r, http.StatusOK)

	// Every field issue 4 lists is present in the JSON (the spec check above
	// already holds the types; this holds the names).
	var raw map[string]json.RawMessage
	if err := json.Unmarshal(r.body, &raw); err != nil {
		t.Fatal(err)
	}
	for _, f := range []string{"id", "run_id", "method", "method_revision", "instrument", "analyte", "unit", "model",
		"weighting", "coefficients", "standard_errors", "covariance", "residual_sd", "df", "r_squared",
		"weight_convention", "points", "checks", "limits", "range", "verdict", "status", "cautions", "engine_version"} {
		if _, ok := raw[f]; !ok {
			t.Errorf("curve lacks %q", f)
		}
	}
	if c.RunID != run.ID || c.Method != "nitrate-uv" || c.Instrument != "photometer-7" || c.Analyte != "nitrate" || c.Unit != "mg/L" {
		t.Errorf("curve header %+v", c)
	}
	if c.Model != oapi.ModelLinear || len(c.Coefficients) != 2 || len(c.StandardErrors) != 2 || len(c.Covariance) != 2 {
		t.Fatalf("linear curve with %d coefficients, %d errors, %d covariance rows, want 2 each", len(c.Coefficients), len(c.StandardErrors), len(c.Covariance))
	}
	// Linear coefficients are [b0, b1]: the invented line has b0 = 0.02,
	// b1 = 0.51; with noise SD 0.004 over 16 readings both land close.
	if b0, b1 := c.Coefficients[0], c.Coefficients[1]; math.Abs(b0-trueIntercept) > 0.01 || math.Abs(b1-trueSlope) > 0.005 {
		t.Errorf("coefficients [%v %v], want about [%v %v] in the order [b0 b1]", b0, b1, trueIntercept, trueSlope)
	}
	if c.Df != 14 || c.N != 16 || c.Levels != 8 {
		t.Errorf("df %d n %d levels %d, want 14, 16, 8", c.Df, c.N, c.Levels)
	}
	if c.ResidualSd == nil || *c.ResidualSd <= 0 || *c.ResidualSd > 3*noiseSD {
		t.Errorf("residual_sd %v, want about the noise SD %v", c.ResidualSd, noiseSD)
	}
	if c.RSquared == nil || *c.RSquared < 0.999 {
		t.Errorf("r_squared %v, want > 0.999", c.RSquared)
	}
	if len(c.Points) != 16 {
		t.Errorf("%d points, want 16", len(c.Points))
	}
	for i, p := range c.Points {
		if p.Fitted == nil || p.Residual == nil || p.BackCalculated == nil || p.Leverage == nil || p.CooksDistance == nil || p.StudentizedResidual == nil || p.RelativeErrorPct == nil {
			t.Errorf("point %d lacks a diagnostic: %+v", i, p)
			continue
		}
		if math.Abs(*p.Fitted+*p.Residual-p.Response) > 1e-9 {
			t.Errorf("point %d: fitted %v + residual %v ≠ response %v", i, *p.Fitted, *p.Residual, p.Response)
		}
	}
	var names []string
	for _, ch := range c.Checks {
		names = append(names, string(ch.Name))
		if ch.Source == "" {
			t.Errorf("check %s names no source", ch.Name)
		}
	}
	if !slices.Equal(names, checkNames) {
		t.Errorf("checks %v, want %v", names, checkNames)
	}
	if c.Limits.Lod == nil || c.Limits.Loq == nil || *c.Limits.Lod <= 0 || *c.Limits.Loq <= *c.Limits.Lod {
		t.Errorf("limits %+v, want 0 < lod < loq", c.Limits)
	}
	if c.Range.Low == nil || c.Range.High == nil || *c.Range.Low != 0.5 || *c.Range.High != 8 {
		t.Errorf("range %+v, want [0.5, 8]", c.Range)
	}
	if c.Verdict != oapi.VerdictPass || c.Status != oapi.CurveStatusPendingReview || c.EngineVersion == "" || len(c.Cautions) == 0 {
		t.Errorf("verdict %s status %s engine %q cautions %d", c.Verdict, c.Status, c.EngineVersion, len(c.Cautions))
	}
	wantProblem(t, e.get(t, e.admin, "/v1/curves/0b9e8d7c-6a5b-4c3d-8e2f-1a0b9c8d7e6f"), http.StatusNotFound, "")
}

func TestCoefficientOrderPerModel(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	tests := []struct {
		model string
		want  []float64 // the invented generating coefficients, in model order
		tol   []float64
	}{
		{"linear", []float64{0.02, 0.51}, []float64{0.01, 0.005}},
		{"linear_origin", []float64{0.51}, []float64{0.01}},
		{"quadratic", []float64{0.02, 0.51, 0.01}, []float64{0.02, 0.02, 0.003}},
	}
	for _, tt := range tests {
		t.Run(tt.model, func(t *testing.T) {
			name := "m-" + strings.ReplaceAll(tt.model, "_", "-")
			decode[oapi.Method](t, e.postJSON(t, e.admin, "/v1/methods", map[string]any{"name": name, "model": tt.model,
				"weighting": "none", "analytes": []map[string]any{{"name": "nitrate", "unit": "mg/L"}}}), http.StatusCreated)
			stds := standards("nitrate", 11)
			for _, s := range stds { // regenerate on the model's own invented curve
				x := s["concentration"].(float64)
				resp := s["responses"].([]float64)
				for k := range resp {
					noise := resp[k] - trueResponse(x)
					y := 0.0
					for p, b := range tt.want {
						if tt.model == "linear_origin" {
							p++
						}
						y += b * math.Pow(x, float64(p))
					}
					resp[k] = round6(y + noise)
				}
			}
			run := e.run(t, e.admin, runBody(name, "photometer-7", baseTime, stds))
			c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()), http.StatusOK)
			if len(c.Coefficients) != len(tt.want) {
				t.Fatalf("%d coefficients, want %d", len(c.Coefficients), len(tt.want))
			}
			for i := range tt.want {
				if math.Abs(c.Coefficients[i]-tt.want[i]) > tt.tol[i] {
					t.Errorf("coefficients %v, want about %v (model-equation order)", c.Coefficients, tt.want)
					break
				}
			}
		})
	}
}

func TestCurveHistory(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nutrients", "nitrate", "phosphate")
	// 7 runs over a week on two instruments, two analytes each: 14 curves.
	type made struct {
		id, instrument, analyte string
		at                      time.Time
	}
	var all []made
	for i := range 7 {
		instrument := "photometer-7"
		if i%3 == 0 {
			instrument = "photometer-8"
		}
		at := baseTime.Add(time.Duration(i) * 24 * time.Hour)
		run := e.run(t, e.admin, runBody("nutrients", instrument, at, standards("nitrate", uint64(20+i)), standards("phosphate", uint64(40+i))))
		for _, c := range run.Curves {
			all = append(all, made{c.ID.String(), instrument, c.Analyte, at})
		}
	}
	// A failed curve on the last day.
	failed := e.run(t, e.admin, runBody("nutrients", "photometer-8", baseTime.Add(7*24*time.Hour),
		[]map[string]any{{"analyte": "nitrate", "level": "L1", "concentration": 1.0, "responses": []float64{0.53}}}))
	all = append(all, made{failed.Curves[0].ID.String(), "photometer-8", "nitrate", baseTime.Add(7 * 24 * time.Hour)})

	pages := func(t *testing.T, query url.Values) []oapi.CurveSummary {
		t.Helper()
		var out []oapi.CurveSummary
		cursor := ""
		for range 100 {
			q := url.Values{}
			for k, v := range query {
				q[k] = v
			}
			q.Set("limit", "3")
			if cursor != "" {
				q.Set("cursor", cursor)
			}
			page := decode[oapi.CurveList](t, e.get(t, e.admin, "/v1/curves?"+q.Encode()), http.StatusOK)
			if len(page.Curves) > 3 {
				t.Fatalf("page of %d, limit 3", len(page.Curves))
			}
			out = append(out, page.Curves...)
			if page.HasMore != (page.NextCursor != nil) {
				t.Fatalf("has_more %v with next_cursor %v: one says there is a next page, the other not", page.HasMore, page.NextCursor)
			}
			if !page.HasMore {
				return out
			}
			cursor = *page.NextCursor
		}
		t.Fatal("more than 100 pages")
		return nil
	}
	tests := []struct {
		name  string
		query url.Values
		keep  func(m made) bool
	}{
		{"all", url.Values{}, func(made) bool { return true }},
		{"instrument", url.Values{"instrument": {"photometer-8"}}, func(m made) bool { return m.instrument == "photometer-8" }},
		{"analyte", url.Values{"analyte": {"phosphate"}}, func(m made) bool { return m.analyte == "phosphate" }},
		{"method", url.Values{"method": {"nutrients"}}, func(made) bool { return true }},
		{"verdict fail", url.Values{"verdict": {"fail"}}, func(m made) bool { return m.id == failed.Curves[0].ID.String() }},
		{"status pending", url.Values{"status": {"pending_review"}}, func(made) bool { return true }},
		{"status approved", url.Values{"status": {"approved"}}, func(made) bool { return false }},
		{"from to", url.Values{"from": {baseTime.Add(48 * time.Hour).Format(time.RFC3339)}, "to": {baseTime.Add(120 * time.Hour).Format(time.RFC3339)}},
			func(m made) bool {
				return !m.at.Before(baseTime.Add(48*time.Hour)) && m.at.Before(baseTime.Add(120*time.Hour))
			}},
		{"instrument and analyte", url.Values{"instrument": {"photometer-7"}, "analyte": {"nitrate"}},
			func(m made) bool { return m.instrument == "photometer-7" && m.analyte == "nitrate" }},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := pages(t, tt.query)
			want := map[string]bool{}
			for _, m := range all {
				if tt.keep(m) {
					want[m.id] = true
				}
			}
			seen := map[string]bool{}
			for i, c := range got {
				id := c.ID.String()
				if seen[id] {
					t.Errorf("curve %s appears twice across pages", id)
				}
				seen[id] = true
				if !want[id] {
					t.Errorf("curve %s (%s %s %s) does not match the filter", id, c.Instrument, c.Analyte, c.Verdict)
				}
				if i > 0 { // newest first: acquired_at descending, then id descending
					p := got[i-1]
					if p.AcquiredAt.Before(c.AcquiredAt.Time) || (p.AcquiredAt.Equal(c.AcquiredAt.Time) && p.ID.String() < id) {
						t.Errorf("curve %d (%v %s) after %v %s is out of order", i, c.AcquiredAt, id, p.AcquiredAt, p.ID)
					}
				}
			}
			if len(seen) != len(want) {
				t.Errorf("got %d curves across pages, want %d", len(seen), len(want))
			}
		})
	}
	list := decode[oapi.CurveList](t, e.get(t, e.admin, "/v1/curves?verdict=fail"), http.StatusOK)
	if len(list.Curves) != 1 || !slices.Contains(list.Curves[0].FailedChecks, "min_levels") {
		t.Errorf("failed curve summary %+v, want failed_checks to name min_levels", list.Curves)
	}

	t.Run("bad cursor", func(t *testing.T) {
		wantProblem(t, e.get(t, e.admin, "/v1/curves?cursor=bm90LWEtY3Vyc29y"), http.StatusBadRequest, "query:cursor")
		wantProblem(t, e.get(t, e.admin, "/v1/curves?cursor=not%20base64"), http.StatusBadRequest, "query:cursor")
	})
}

func TestCurvePlots(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	id := e.nitrateCurve(t).Curves[0].ID.String()

	svg := e.get(t, e.admin, "/v1/curves/"+id+"/plot.svg")
	if svg.status != http.StatusOK || !strings.HasPrefix(svg.header.Get("Content-Type"), "image/svg+xml") {
		t.Fatalf("plot.svg: %d %s", svg.status, svg.header.Get("Content-Type"))
	}
	dec := xml.NewDecoder(bytes.NewReader(svg.body))
	root := ""
	for {
		tok, err := dec.Token()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatalf("plot.svg is not well-formed XML: %v", err)
		}
		if se, ok := tok.(xml.StartElement); ok && root == "" {
			root = se.Name.Local
		}
	}
	if root != "svg" {
		t.Errorf("plot.svg root element %q, want svg", root)
	}

	pngReply := e.get(t, e.admin, "/v1/curves/"+id+"/plot.png")
	if pngReply.status != http.StatusOK || pngReply.header.Get("Content-Type") != "image/png" {
		t.Fatalf("plot.png: %d %s", pngReply.status, pngReply.header.Get("Content-Type"))
	}
	img, err := png.Decode(bytes.NewReader(pngReply.body))
	if err != nil {
		t.Fatalf("plot.png does not decode: %v", err)
	}
	if b := img.Bounds(); b.Dx() < 200 || b.Dy() < 200 {
		t.Errorf("plot.png is %v, too small to read", b)
	}
	wantProblem(t, e.get(t, e.admin, "/v1/curves/0b9e8d7c-6a5b-4c3d-8e2f-1a0b9c8d7e6f/plot.png"), http.StatusNotFound, "")
}

func TestPredictions(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	id := e.nitrateCurve(t).Curves[0].ID.String()
	_, lims := e.token(t, "lims-1", "results:read")
	curve := decode[oapi.Curve](t, e.get(t, lims, "/v1/curves/"+id), http.StatusOK)
	loq := *curve.Limits.Loq
	belowLOQ := loq / 2
	samples := []map[string]any{
		{"id": "W-0001", "responses": []float64{trueResponse(3), trueResponse(3) + 0.002}},
		{"id": "W-0002", "responses": []float64{trueResponse(6.5)}},
		{"id": "W-0003", "responses": []float64{trueResponse(2)}, "dilution": 5},
		{"id": "W-0004", "responses": []float64{trueResponse(15)}},
		{"id": "W-0005", "responses": []float64{trueResponse(belowLOQ)}},
	}
	wantX := []float64{3 + 0.001/trueSlope, 6.5, 10, 15, belowLOQ}
	r := e.postJSON(t, lims, "/v1/curves/"+id+"/predictions", map[string]any{"samples": samples})
	got := decode[oapi.PredictionResponse](t, r, http.StatusOK)
	// A longer answer (over net/http's 2 kB buffer) is sent with its
	// length in one piece, not chunked.
	var more []map[string]any
	for k := range 4 {
		for _, smp := range samples {
			more = append(more, map[string]any{"id": fmt.Sprintf("%s-%d", smp["id"], k), "responses": smp["responses"]})
		}
	}
	long := e.postJSON(t, lims, "/v1/curves/"+id+"/predictions", map[string]any{"samples": more})
	if cl := long.header.Get("Content-Length"); long.status != http.StatusOK || len(long.body) <= 2048 || cl != strconv.Itoa(len(long.body)) {
		t.Errorf("%d: Content-Length %q for a body of %d bytes", long.status, cl, len(long.body))
	}
	if got.CurveID.String() != id || got.Analyte != "nitrate" || got.Unit != "mg/L" || got.Confidence != 0.95 || len(got.Cautions) == 0 {
		t.Errorf("header %+v", got)
	}
	if len(got.Results) != len(samples) {
		t.Fatalf("%d results, want %d", len(got.Results), len(samples))
	}
	for i, res := range got.Results {
		if res.ID != samples[i]["id"] {
			t.Errorf("result %d is %s, want request order", i, res.ID)
		}
		if res.Concentration == nil || !res.Interval.Bounded || res.Interval.Low == nil || res.Interval.High == nil {
			t.Errorf("%s: no bounded estimate: %+v", res.ID, res)
			continue
		}
		x, lo, hi := *res.Concentration, *res.Interval.Low, *res.Interval.High
		// The fitted line is within noise of the invented one: the estimate
		// is within 2 % (plus the LOQ's scale near zero) of the true value.
		if tol := 0.02*wantX[i] + loq/3; math.Abs(x-wantX[i]) > tol {
			t.Errorf("%s: concentration %v, want %v ± %v", res.ID, x, wantX[i], tol)
		}
		if !(lo < x && x < hi) || res.Interval.Level != 0.95 {
			t.Errorf("%s: interval [%v, %v] at %v does not contain %v at 0.95", res.ID, lo, hi, res.Interval.Level, x)
		}
	}
	flags := func(i int) []oapi.PredictionFlag { return got.Results[i].Flags }
	if len(flags(0)) != 0 || len(flags(1)) != 0 {
		t.Errorf("in-range samples flagged: %v, %v", flags(0), flags(1))
	}
	if got.Results[2].Dilution != 5 {
		t.Errorf("dilution %v, want 5", got.Results[2].Dilution)
	}
	if !slices.Contains(flags(3), "above_range") || !slices.Contains(flags(3), "extrapolated") {
		t.Errorf("reading above the top standard flagged %v, want above_range and extrapolated", flags(3))
	}
	if !slices.Contains(flags(4), "below_loq") {
		t.Errorf("reading at LOQ/2 flagged %v, want below_loq", flags(4))
	}
	// A wider confidence gives a wider interval.
	wide := decode[oapi.PredictionResponse](t, e.postJSON(t, lims, "/v1/curves/"+id+"/predictions",
		map[string]any{"confidence": 0.99, "samples": samples[:1]}), http.StatusOK)
	if w := wide.Results[0].Interval; w.Level != 0.99 || *w.High-*w.Low <= *got.Results[0].Interval.High-*got.Results[0].Interval.Low {
		t.Errorf("99 %% interval %+v not wider than the 95 %% one %+v", w, got.Results[0].Interval)
	}

	// A curve without a fit cannot quantify anything.
	e.method(t, "nitrate-one", "nitrate")
	unfit := e.run(t, e.admin, runBody("nitrate-one", "photometer-7", baseTime,
		[]map[string]any{{"analyte": "nitrate", "level": "L1", "concentration": 1.0, "responses": []float64{0.53, 0.54}}}))
	wantProblem(t, e.postJSON(t, lims, "/v1/curves/"+unfit.Curves[0].ID.String()+"/predictions", map[string]any{"samples": samples[:1]}), http.StatusConflict, "")
	wantProblem(t, e.postJSON(t, lims, "/v1/curves/0b9e8d7c-6a5b-4c3d-8e2f-1a0b9c8d7e6f/predictions", map[string]any{"samples": samples[:1]}), http.StatusNotFound, "")
}

func TestReviewAndAudit(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	run := e.nitrateCurve(t)
	id := run.Curves[0].ID.String()
	qaID, qa := e.token(t, "qa-lead", "curves:review")

	r := e.postJSON(t, qa, "/v1/curves/"+id+"/review", map[string]any{"decision": "approve", "reason": "checked against the SOP"})
	c := decode[oapi.Curve](t, r, http.StatusOK)
	if c.Status != oapi.CurveStatusApproved || c.Review == nil || c.Review.Decision != oapi.ReviewApprove || c.Review.Reason == nil || *c.Review.Reason != "checked against the SOP" {
		t.Errorf("reviewed curve status %s review %+v", c.Status, c.Review)
	}
	if got := decode[oapi.Curve](t, e.get(t, qa, "/v1/curves/"+id), http.StatusOK); got.Status != oapi.CurveStatusApproved {
		t.Errorf("GET after review: status %s", got.Status)
	}
	before := e.counts(t)
	wantProblem(t, e.postJSON(t, qa, "/v1/curves/"+id+"/review", map[string]any{"decision": "reject", "reason": "second thoughts"}), http.StatusConflict, "")
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("the refused second review wrote rows: %s", d)
	}

	// A failed curve needs a reason to be approved.
	e.method(t, "nitrate-one", "nitrate")
	bad := e.run(t, e.admin, runBody("nitrate-one", "photometer-7", baseTime,
		[]map[string]any{{"analyte": "nitrate", "level": "L1", "concentration": 1.0, "responses": []float64{0.53, 0.54}}}))
	badID := bad.Curves[0].ID.String()
	before = e.counts(t)
	wantProblem(t, e.postJSON(t, qa, "/v1/curves/"+badID+"/review", map[string]any{"decision": "approve"}), http.StatusUnprocessableEntity, "/reason")
	if d := before.diff(e.counts(t)); d != "" {
		t.Errorf("the refused approval wrote rows: %s", d)
	}
	ok := decode[oapi.Curve](t, e.postJSON(t, qa, "/v1/curves/"+badID+"/review",
		map[string]any{"decision": "approve", "reason": "single-point check standard, accepted under SOP 12 section 4"}), http.StatusOK)
	if ok.Status != oapi.CurveStatusApproved || ok.Verdict != oapi.VerdictFail {
		t.Errorf("approved failed curve: status %s verdict %s", ok.Status, ok.Verdict)
	}

	audit := decode[oapi.AuditLog](t, e.get(t, qa, "/v1/curves/"+id+"/audit"), http.StatusOK)
	var actions []string
	for i, ev := range audit.Events {
		actions = append(actions, ev.Action)
		if ev.Actor == "" || ev.Detail == "" || ev.At.IsZero() {
			t.Errorf("event %d incomplete: %+v", i, ev)
		}
		if i > 0 && ev.At.Before(audit.Events[i-1].At.Time) {
			t.Errorf("event %d is older than event %d", i, i-1)
		}
	}
	for _, want := range []string{"run.create", "curve.review"} {
		if !slices.Contains(actions, want) {
			t.Errorf("audit actions %v lack %s", actions, want)
		}
	}
	last := audit.Events[len(audit.Events)-1]
	if last.Action != "curve.review" || !strings.Contains(last.Actor, "qa-lead") || !strings.Contains(last.Actor, qaID) ||
		!strings.Contains(last.Detail, "checked against the SOP") || !strings.Contains(last.Detail, "approve") {
		t.Errorf("review event %+v, want actor qa-lead (%s) and the decision and reason in detail", last, qaID)
	}
	if first := audit.Events[0]; first.Action != "run.create" || !strings.Contains(first.Actor, "bootstrap-admin") || !strings.Contains(first.Detail, run.ID.String()) {
		t.Errorf("first event %+v, want run.create by bootstrap-admin naming run %s", first, run.ID)
	}
	wantProblem(t, e.get(t, qa, "/v1/curves/0b9e8d7c-6a5b-4c3d-8e2f-1a0b9c8d7e6f/audit"), http.StatusNotFound, "")
}
