package api_test

import (
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"sync"
	"testing"
	"time"

	"curvekeeper/api/oapi"
)

func TestCreateRunOneAnalyte(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate", "phosphate")
	_, instrument := e.token(t, "photometer-7", "runs:write")
	before := e.counts(t)

	r := e.postJSON(t, instrument, "/v1/runs", runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1)))
	got := decode[oapi.RunCreated](t, r, http.StatusCreated)
	if len(got.Curves) != 1 {
		t.Fatalf("got %d curves, want 1", len(got.Curves))
	}
	c := got.Curves[0]
	if c.Analyte != "nitrate" || c.Status != oapi.CurveStatusPendingReview {
		t.Errorf("curve %+v, want nitrate pending_review", c)
	}
	// The invented data lie on a straight line with small noise; every
	// mandatory default check should pass.
	if c.Verdict != oapi.VerdictPass {
		t.Errorf("verdict %s, want pass", c.Verdict)
	}
	if loc, want := r.header.Get("Location"), "/v1/runs/"+got.ID.String(); loc != want {
		t.Errorf("Location %q, want %q", loc, want)
	}
	if r.header.Get("Idempotency-Replayed") != "false" {
		t.Errorf("Idempotency-Replayed %q, want false", r.header.Get("Idempotency-Replayed"))
	}
	if len(got.Cautions) == 0 {
		t.Error("no cautions")
	}
	after := e.counts(t)
	if after["runs"]-before["runs"] != 1 || after["curves"]-before["curves"] != 1 || after["readings"]-before["readings"] != 16 {
		t.Errorf("rows changed by %s; want 1 run, 1 curve, 16 readings", before.diff(after))
	}

	run := decode[oapi.Run](t, e.get(t, instrument, "/v1/runs/"+got.ID.String()), http.StatusOK)
	if run.Method != "nitrate-uv" || run.MethodRevision != 1 || run.Instrument != "photometer-7" || run.Format != oapi.RunFormatJSON {
		t.Errorf("run header %+v", run)
	}
	if run.Operator == nil || *run.Operator != "analyst-3" {
		t.Errorf("operator %v, want analyst-3", run.Operator)
	}
	if !run.AcquiredAt.Equal(baseTime) {
		t.Errorf("acquired_at %v, want %v", run.AcquiredAt, baseTime)
	}
	wantStandards(t, run.Standards, standards("nitrate", 1))
	if len(run.Curves) != 1 || run.Curves[0].ID != c.ID {
		t.Errorf("run curves %+v, want [%s]", run.Curves, c.ID)
	}
}

// wantStandards compares the stored standards with the posted ones, exactly:
// the instrument's numbers must come back as sent.
func wantStandards(t *testing.T, got []oapi.Standard, want []map[string]any) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("got %d standards, want %d", len(got), len(want))
	}
	for i, w := range want {
		g := got[i]
		wr := w["responses"].([]float64)
		if g.Analyte != w["analyte"] || g.Level != w["level"] || g.Concentration != w["concentration"] || fmt.Sprint(g.Responses) != fmt.Sprint(wr) {
			t.Errorf("standard %d = %+v, want %v", i, g, w)
		}
	}
}

func TestCreateRunTwoAnalytes(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nutrients", "nitrate", "phosphate")
	body := runBody("nutrients", "photometer-7", baseTime, standards("nitrate", 2), standards("phosphate", 3))
	got := e.run(t, e.admin, body)
	if len(got.Curves) != 2 {
		t.Fatalf("got %d curves, want 2", len(got.Curves))
	}
	seen := map[string]bool{}
	for _, c := range got.Curves {
		seen[c.Analyte] = true
		curve := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+c.ID.String()), http.StatusOK)
		if curve.Analyte != c.Analyte || curve.RunID != got.ID {
			t.Errorf("curve %s is %s of run %s, want %s of %s", c.ID, curve.Analyte, curve.RunID, c.Analyte, got.ID)
		}
	}
	if !seen["nitrate"] || !seen["phosphate"] {
		t.Errorf("curves for %v, want nitrate and phosphate", seen)
	}
}

func TestCreateRunIdempotencyReplay(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	_, instrument := e.token(t, "photometer-7", "runs:write")
	body := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))
	const key = "photometer-7:2026-03-02T08:00:00Z"

	first := e.postJSON(t, instrument, "/v1/runs", body, "Idempotency-Key", key)
	orig := decode[oapi.RunCreated](t, first, http.StatusCreated)
	afterFirst := e.counts(t)

	second := e.postJSON(t, instrument, "/v1/runs", body, "Idempotency-Key", key)
	replay := decode[oapi.RunCreated](t, second, http.StatusCreated)
	if replay.ID != orig.ID || len(replay.Curves) != 1 || replay.Curves[0].ID != orig.Curves[0].ID {
		t.Errorf("replay %+v, want the original %+v", replay, orig)
	}
	if got := second.header.Get("Idempotency-Replayed"); got != "true" {
		t.Errorf("Idempotency-Replayed %q, want true", got)
	}
	if got, want := second.header.Get("Location"), first.header.Get("Location"); got != want {
		t.Errorf("replayed Location %q, want %q", got, want)
	}
	if d := afterFirst.diff(e.counts(t)); d != "" {
		t.Errorf("the replay wrote rows: %s", d)
	}

	// The same key with another body is refused and stores nothing.
	changed := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 99))
	wantProblem(t, e.postJSON(t, instrument, "/v1/runs", changed, "Idempotency-Key", key), http.StatusUnprocessableEntity, "header:Idempotency-Key")
	if d := afterFirst.diff(e.counts(t)); d != "" {
		t.Errorf("the refused reuse wrote rows: %s", d)
	}

	// Keys are scoped to their token: another instrument's same key is a new run.
	_, other := e.token(t, "photometer-8", "runs:write")
	third := e.run(t, other, body)
	if third.ID == orig.ID {
		t.Error("another token's request without the key replayed the first run")
	}
}

func TestCreateRunConcurrentSameKey(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	body := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 4))
	const n = 6
	replies := make([]reply, n)
	var wg sync.WaitGroup
	for i := range n {
		wg.Go(func() {
			replies[i] = e.postJSON(t, e.admin, "/v1/runs", body, "Idempotency-Key", "same-key-1")
		})
	}
	wg.Wait()
	ids := map[string]int{}
	for i, r := range replies {
		switch r.status {
		case http.StatusCreated:
			ids[decode[oapi.RunCreated](t, r, http.StatusCreated).ID.String()]++
		case http.StatusConflict: // the spec allows a 409 while the first is in flight
			if r.header.Get("Retry-After") == "" {
				t.Errorf("reply %d: 409 without Retry-After", i)
			}
		default:
			t.Errorf("reply %d: %s", i, r)
		}
	}
	if len(ids) != 1 {
		t.Errorf("concurrent posts with one key answered run ids %v, want exactly one", ids)
	}
	if c := e.counts(t); c["runs"] != 1 {
		t.Errorf("%d runs stored, want 1", c["runs"])
	}
}

// nitrateCSV is the invented run as an instrument's CSV export.
func nitrateCSV(seed uint64) (string, []map[string]any) {
	stds := standards("nitrate", seed)
	var b strings.Builder
	b.WriteString("# photometer-7 export, invented\n")
	b.WriteString("kind,analyte,level,concentration,response,sample_id,dilution\n")
	for _, s := range stds {
		for _, y := range s["responses"].([]float64) {
			fmt.Fprintf(&b, "standard,%s,%s,%v,%v,,\n", s["analyte"], s["level"], s["concentration"], y)
		}
	}
	b.WriteString("sample,nitrate,,,1.55,W-0042,\n")
	b.WriteString("sample,nitrate,,,0.8,W-0043,2\n")
	return b.String(), stds
}

func csvPath(method, instrument, at string) string {
	q := url.Values{"method": {method}, "instrument": {instrument}, "acquired_at": {at}, "operator": {"analyst-3"}}
	return "/v1/runs?" + q.Encode()
}

func TestCreateRunCSV(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	body, stds := nitrateCSV(5)
	r := e.do(t, call{method: http.MethodPost, path: csvPath("nitrate-uv", "photometer-7", "2026-03-02T08:00:00Z"),
		token: e.admin, contentType: "text/csv", body: []byte(body)})
	created := decode[oapi.RunCreated](t, r, http.StatusCreated)
	if len(created.Curves) != 1 || created.Curves[0].Analyte != "nitrate" {
		t.Fatalf("curves %+v, want one nitrate curve", created.Curves)
	}
	run := decode[oapi.Run](t, e.get(t, e.admin, "/v1/runs/"+created.ID.String()), http.StatusOK)
	if run.Format != oapi.RunFormatCSV || run.Instrument != "photometer-7" || !run.AcquiredAt.Equal(baseTime) {
		t.Errorf("run header %+v", run)
	}
	wantStandards(t, run.Standards, stds)
	if len(run.Samples) != 2 || run.Samples[0].ID != "W-0042" || run.Samples[0].Dilution != 1 ||
		run.Samples[1].ID != "W-0043" || run.Samples[1].Dilution != 2 || run.Samples[1].Responses[0] != 0.8 {
		t.Errorf("samples %+v", run.Samples)
	}
	// The same CSV posted again with a key replays it.
	const key = "csv-export-0001"
	c := call{method: http.MethodPost, path: csvPath("nitrate-uv", "photometer-7", "2026-03-02T09:00:00Z"),
		token: e.admin, contentType: "text/csv", body: []byte(body), header: map[string]string{"Idempotency-Key": key}}
	a := decode[oapi.RunCreated](t, e.do(t, c), http.StatusCreated)
	b := e.do(t, c)
	if decode[oapi.RunCreated](t, b, http.StatusCreated).ID != a.ID || b.header.Get("Idempotency-Replayed") != "true" {
		t.Errorf("CSV replay %s, want run %s replayed", b, a.ID)
	}
}

// A run whose numbers are valid but cannot be fitted is stored as evidence,
// with a failed curve whose checks say why.
func TestCreateRunUnfittableIsStored(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	flat := standards("nitrate", 1)
	for _, s := range flat {
		s["responses"] = []float64{0.5, 0.5}
	}
	tests := []struct {
		name string
		stds []map[string]any
	}{
		{"one level", []map[string]any{{"analyte": "nitrate", "level": "L1", "concentration": 2.0, "responses": []float64{1.04, 1.05, 1.03}}}},
		{"all responses equal", flat},
	}
	for i, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			before := e.counts(t)
			got := e.run(t, e.admin, runBody("nitrate-uv", "photometer-7", baseTime.Add(time.Duration(i)*time.Hour), tt.stds))
			if len(got.Curves) != 1 || got.Curves[0].Verdict != oapi.VerdictFail {
				t.Fatalf("curves %+v, want one failed curve", got.Curves)
			}
			after := e.counts(t)
			if after["runs"]-before["runs"] != 1 || after["curves"]-before["curves"] != 1 {
				t.Errorf("rows changed by %s, want the run and its curve stored", before.diff(after))
			}
			curve := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+got.Curves[0].ID.String()), http.StatusOK)
			var failed []string
			for _, ch := range curve.Checks {
				if !ch.Passed {
					failed = append(failed, string(ch.Name))
					if ch.Detail == "" {
						t.Errorf("check %s failed without a detail", ch.Name)
					}
				}
			}
			if len(failed) == 0 {
				t.Errorf("failed curve with every check passed: %+v", curve.Checks)
			}
			if tt.name == "one level" && !contains(failed, "min_levels") {
				t.Errorf("failed checks %v, want min_levels among them", failed)
			}
			run := decode[oapi.Run](t, e.get(t, e.admin, "/v1/runs/"+got.ID.String()), http.StatusOK)
			wantStandards(t, run.Standards, tt.stds)
		})
	}
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

func TestCreateRunRuleBreaches(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	dupLevel := standards("nitrate", 1)
	dupLevel[3]["level"] = "L1"
	foreign := standards("nitrate", 1)
	foreign[1]["analyte"] = "arsenic"
	tests := []struct {
		name    string
		body    map[string]any
		pointer string
	}{
		{"analyte the method does not list", runBody("nitrate-uv", "photometer-7", baseTime, foreign), "/standards/1/analyte"},
		{"unknown method", runBody("sulfate-ic", "photometer-7", baseTime, standards("nitrate", 1)), "/method"},
		{"duplicate level", runBody("nitrate-uv", "photometer-7", baseTime, dupLevel), "/standards/3/level"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			before := e.counts(t)
			wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", tt.body), http.StatusUnprocessableEntity, tt.pointer)
			if d := before.diff(e.counts(t)); d != "" {
				t.Errorf("a refused run wrote rows: %s", d)
			}
		})
	}
}
