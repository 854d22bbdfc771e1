package api_test

// Fuzz targets that post arbitrary bodies through the whole handler stack
// (request id, timeout, body limit, auth, the OpenAPI validator, decoding,
// the handler and the store) on a real PostgreSQL database. The rules: never
// a 5xx, every 4xx is application/problem+json with a detail, and a 2xx is
// well-formed JSON. Seed corpora live in testdata/fuzz/<target>/.
// FuzzRunFastPathSound, which compares two validators without the stack,
// lives here to share the runs the stack's targets start from.

import (
	"bytes"
	"context"
	"encoding/json"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"curvekeeper/api"
	"curvekeeper/calib"
	"curvekeeper/lab"
	"curvekeeper/store/dbtest"
)

// fuzzServer is one fuzz target's service, database and tokens.
type fuzzServer struct {
	h      http.Handler
	writer string // runs:write secret
	reader string // results:read secret
	curve  string // a fitted curve's id
}

func newFuzzServer(f *testing.F) *fuzzServer {
	f.Helper()
	db := dbtest.NewDB(f)
	ctx := context.Background()
	srv, err := api.New(api.Config{BodyLimit: 256 << 10, RequestTimeout: 10 * time.Second, RateLimit: -1},
		lab.NewService(db, testClock), slog.New(slog.DiscardHandler))
	if err != nil {
		f.Fatal(err)
	}
	_, _, err = db.CreateMethod(ctx, lab.MethodInput{
		Name: "nitrate-ic", Model: calib.Linear, Weighting: calib.WeightNone, Confidence: 0.95,
		Analytes:   []lab.Analyte{{Name: "nitrate", Unit: "mg/L"}, {Name: "nitrite", Unit: "mg/L"}},
		Acceptance: calib.DefaultPolicy(),
	}, "fuzz-setup")
	if err != nil {
		f.Fatal(err)
	}
	fs := &fuzzServer{h: srv.Handler()}
	if _, fs.writer, err = db.CreateToken(ctx, "fuzz-writer", []string{lab.ScopeRunsWrite}, "fuzz-setup"); err != nil {
		f.Fatal(err)
	}
	if _, fs.reader, err = db.CreateToken(ctx, "fuzz-reader", []string{lab.ScopeResultsRead}, "fuzz-setup"); err != nil {
		f.Fatal(err)
	}
	rec := fs.post(fuzzRunSeed, "/v1/runs", fs.writer)
	if rec.Code != http.StatusCreated {
		f.Fatalf("seed run: %d %s", rec.Code, rec.Body)
	}
	var created struct {
		Curves []struct {
			ID string `json:"id"`
		} `json:"curves"`
	}
	if err := json.Unmarshal(rec.Body.Bytes(), &created); err != nil || len(created.Curves) == 0 {
		f.Fatalf("seed run body %s: %v", rec.Body, err)
	}
	fs.curve = created.Curves[0].ID
	return fs
}

func (fs *fuzzServer) post(body []byte, path, token string) *httptest.ResponseRecorder {
	req := httptest.NewRequest(http.MethodPost, path, bytes.NewReader(body))
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("Authorization", "Bearer "+token)
	rec := httptest.NewRecorder()
	fs.h.ServeHTTP(rec, req)
	return rec
}

// checkAnswer applies the rules every answer must keep.
func checkAnswer(t *testing.T, in []byte, rec *httptest.ResponseRecorder, ok ...int) {
	t.Helper()
	ct := rec.Header().Get("Content-Type")
	switch {
	case rec.Code >= 500:
		t.Fatalf("status %d for %q: %s", rec.Code, in, rec.Body)
	case rec.Code >= 400:
		if !strings.HasPrefix(ct, "application/problem+json") {
			t.Fatalf("status %d with Content-Type %q for %q", rec.Code, ct, in)
		}
		var p api.Problem
		if err := json.Unmarshal(rec.Body.Bytes(), &p); err != nil || p.Status != rec.Code || p.Detail == "" {
			t.Fatalf("problem %s for %q: %v", rec.Body, in, err)
		}
	default:
		good := false
		for _, s := range ok {
			good = good || s == rec.Code
		}
		if !good || !strings.HasPrefix(ct, "application/json") || !json.Valid(rec.Body.Bytes()) {
			t.Fatalf("status %d, Content-Type %q, body %s for %q", rec.Code, ct, rec.Body, in)
		}
	}
}

var fuzzRunSeed = []byte(`{"method":"nitrate-ic","instrument":"ic-02","acquired_at":"2025-03-01T08:00:00Z",
"standards":[{"analyte":"nitrate","level":"L1","concentration":0.5,"responses":[0.77,0.771]},
{"analyte":"nitrate","level":"L2","concentration":1,"responses":[1.52,1.518]},
{"analyte":"nitrate","level":"L3","concentration":2,"responses":[3.02,3.03]},
{"analyte":"nitrate","level":"L4","concentration":5,"responses":[7.52,7.51]},
{"analyte":"nitrate","level":"L5","concentration":10,"responses":[15.02,15.01]},
{"analyte":"nitrate","level":"L6","concentration":20,"responses":[30.01,30.04]}],
"samples":[{"id":"W-0043","analyte":"nitrate","responses":[4.2],"dilution":2}]}`)

// createRunSeeds are the hand-written JSON runs FuzzCreateRunJSON and
// FuzzRunFastPathSound start from.
var createRunSeeds = []string{
	string(fuzzRunSeed),
	`{}`, `[]`, `null`, `{"method":`,
	`{"method":"nitrate-ic","instrument":"ic-02","acquired_at":"2025-03-01T08:00:00Z","standards":[{"analyte":"nitrate","level":"L1","concentration":"NaN","responses":[1]}]}`,
	`{"method":"nitrate-ic","instrument":"ic-02","acquired_at":"2025-03-01T08:00:00Z","standards":[{"analyte":"nitrate","level":"L1","concentration":1e308,"responses":[-1e308]}]}`,
	`{"method":"nitrate-ic","instrument":"ic-02","acquired_at":"2025-03-01T08:00:00Z","standards":[{"analyte":"nitrate","level":"L1","concentration":1,"responses":[1]},{"analyte":"nitrate","level":"L1","concentration":2,"responses":[2]}]}`,
	`{"method":"nitrate-ic","instrument":"ic-02","acquired_at":"2025-03-01T08:00:00Z","standards":[{"analyte":"nitrate","level":"L1","concentration":1,"responses":[5,5]},{"analyte":"nitrate","level":"L2","concentration":2,"responses":[5,5]}]}`,
	`{"method":"x'; DROP TABLE runs; --","instrument":"ic\u0000","acquired_at":"2025-03-01T08:00:00Z","standards":[]}`,
	`{"method":"nitrate-ic","instrument":"ic-02","acquired_at":"not a time","standards":[{"analyte":"nitrate","level":"L1","concentration":-1,"responses":[]}],"extra":true}`,
}

// FuzzCreateRunJSON posts arbitrary JSON bodies to POST /v1/runs.
func FuzzCreateRunJSON(f *testing.F) {
	fs := newFuzzServer(f)
	for _, s := range createRunSeeds {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, in []byte) {
		rec := fs.post(in, "/v1/runs", fs.writer)
		checkAnswer(t, in, rec, http.StatusCreated)
	})
}

// FuzzRunFastPathSound: whatever the body and Idempotency-Key (none when
// empty), a JSON POST /v1/runs that the run fast path accepts is one the
// spec validator accepts, and the fast path decoded it as echo's binder and
// encoding/json do (api.CheckRunFastPath). Unlike the other targets here it
// calls the two validators directly, not the handler stack. Seeds: the
// runs of the other tests, and FuzzCreateRunJSON's seeds and corpus.
func FuzzRunFastPathSound(f *testing.F) {
	for _, body := range runSeedBodies(f) {
		f.Add(body, "")
		f.Add(body, "b7f0c6e2-6a55-4f7e-9a3c-3c2b1f1d9e01")
	}
	f.Fuzz(func(t *testing.T, body []byte, idempotencyKey string) {
		api.CheckRunFastPath(t, body, idempotencyKey)
	})
}

// TestRunFastPathTakesTestRuns: the runs the tests and the benchmark post
// take the run fast path, or it would be dead code.
func TestRunFastPathTakesTestRuns(t *testing.T) {
	t.Parallel()
	bodies := map[string][]byte{
		"fuzz seed run": fuzzRunSeed,
		"one analyte":   mustJSON(t, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))),
		"two analytes":  mustJSON(t, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 2), standards("phosphate", 3))),
	}
	for name, body := range bodies {
		if !api.CheckRunFastPath(t, body, "retry-7") {
			t.Errorf("%s: the fast path refuses %s", name, body)
		}
	}
}

// runSeedBodies are the JSON runs the other tests post, FuzzCreateRunJSON's
// hand-written seeds and the inputs of its corpus in testdata/fuzz.
func runSeedBodies(f *testing.F) [][]byte {
	bodies := [][]byte{
		mustJSON(f, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))),
		mustJSON(f, runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 2), standards("phosphate", 3))),
	}
	for _, s := range createRunSeeds {
		bodies = append(bodies, []byte(s))
	}
	files, err := filepath.Glob("testdata/fuzz/FuzzCreateRunJSON/*")
	if err != nil || len(files) == 0 {
		f.Fatalf("FuzzCreateRunJSON's corpus: %v files, %v", len(files), err)
	}
	for _, name := range files {
		raw, err := os.ReadFile(name)
		if err != nil {
			f.Fatal(err)
		}
		// A corpus file is "go test fuzz v1" and one line []byte("...").
		header, value, _ := strings.Cut(strings.TrimSpace(string(raw)), "\n")
		quoted, ok := strings.CutPrefix(value, "[]byte(")
		body, err := strconv.Unquote(strings.TrimSuffix(quoted, ")"))
		if header != "go test fuzz v1" || !ok || err != nil {
			f.Fatalf("%s is not a corpus file of one []byte: %v", name, err)
		}
		bodies = append(bodies, []byte(body))
	}
	return bodies
}

// FuzzPredictRequest posts arbitrary JSON bodies to
// POST /v1/curves/{id}/predictions of a fitted curve.
func FuzzPredictRequest(f *testing.F) {
	fs := newFuzzServer(f)
	for _, s := range []string{
		`{"samples":[{"id":"W-0043","responses":[4.2,4.25],"dilution":2}]}`,
		`{"confidence":0.99,"samples":[{"id":"W-1","responses":[0]}]}`,
		`{"samples":[{"id":"W-1","responses":[1e308]}]}`,
		`{"samples":[{"id":"W-1","responses":[-1e308]}],"confidence":1}`,
		`{"samples":[{"id":"W-1","responses":["Infinity"]}]}`,
		`{"samples":[{"id":"W-1","responses":[1],"dilution":0}]}`,
		`{"samples":[]}`, `{"samples":null}`, `{`, `{"samples":[{"id":"\u00e9\u202e","responses":[1]}]}`,
	} {
		f.Add([]byte(s))
	}
	path := "/v1/curves/" + fs.curve + "/predictions"
	f.Fuzz(func(t *testing.T, in []byte) {
		rec := fs.post(in, path, fs.reader)
		checkAnswer(t, in, rec, http.StatusOK)
	})
}
