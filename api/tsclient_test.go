package api_test

import (
	"encoding/json"
	"fmt"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
)

// TestGeneratedTypeScriptClient checks the contract with tools no one on
// the project wrote, against a real server: it captures a set of real
// responses as TypeScript constants typed by the types openapi-typescript
// generated from the spec (clients/ts/gen/schema.d.ts) and type-checks them
// with tsc (an undeclared field, a missing required one, a null where the
// spec allows none or an enum value the spec lacks fails), then posts a CSV
// run through a client built with openapi-fetch (clients/ts/src/csv-run.ts)
// and checks the server stored it. It needs the npm project installed and
// the types generated; .ci/run does both and sets CURVEKEEPER_TS_CLIENT to
// clients/ts. Without it the test is skipped.
func TestGeneratedTypeScriptClient(t *testing.T) {
	dir := os.Getenv("CURVEKEEPER_TS_CLIENT")
	if dir == "" {
		t.Skip("set CURVEKEEPER_TS_CLIENT to the absolute path of clients/ts (after npm ci and npm run gen) to run; .ci/run does")
	}
	dir, err := filepath.Abs(dir)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(filepath.Join(dir, "gen", "schema.d.ts")); err != nil {
		t.Fatalf("generated types missing (run npm run gen in %s): %v", dir, err)
	}
	e := newEnv(t)
	e.method(t, "nitrate-uv", "nitrate")
	_, instrument := e.token(t, "photometer-7", "runs:write")

	// Real responses of the main reads and writes, typed by operation.
	var ts strings.Builder
	ts.WriteString("// Written by api/tsclient_test.go from a real server; type-checked by tsc.\n")
	ts.WriteString("import type { paths } from \"../gen/schema.js\";\n\n")
	n := 0
	capture := func(tpl, method string, c call) reply {
		t.Helper()
		r := e.do(t, c)
		ct, _, _ := strings.Cut(r.header.Get("Content-Type"), ";")
		if !json.Valid(r.body) {
			t.Fatalf("%s %s: not JSON: %s", method, c.path, r)
		}
		n++
		fmt.Fprintf(&ts, "// %s %s → %d\nexport const r%d: paths[%q][%q][\"responses\"][%d][\"content\"][%q] = %s;\n\n",
			strings.ToUpper(method), c.path, r.status, n, tpl, method, r.status, ct, r.body)
		return r
	}
	post := func(tpl, path, token string, body any) reply {
		b, err := json.Marshal(body)
		if err != nil {
			t.Fatal(err)
		}
		return capture(tpl, "post", call{method: http.MethodPost, path: path, token: token, contentType: "application/json", body: b})
	}
	get := func(tpl, path, token string) reply {
		return capture(tpl, "get", call{method: http.MethodGet, path: path, token: token})
	}
	body := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 1))
	body["samples"] = []map[string]any{{"id": "W-0042", "analyte": "nitrate", "responses": []float64{0.5, 0.52}},
		{"id": "W-0043", "analyte": "nitrate", "responses": []float64{-3}}}
	created := decode[struct {
		ID     string `json:"id"`
		Curves []struct {
			ID string `json:"id"`
		} `json:"curves"`
	}](t, post("/v1/runs", "/v1/runs", instrument, body), http.StatusCreated)
	run, curve := created.ID, created.Curves[0].ID
	get("/v1/runs/{id}", "/v1/runs/"+run, instrument)
	get("/v1/runs/{id}/results", "/v1/runs/"+run+"/results", e.admin)
	get("/v1/curves/{id}", "/v1/curves/"+curve, e.admin)
	get("/v1/curves", "/v1/curves", e.admin)
	post("/v1/curves/{id}/predictions", "/v1/curves/"+curve+"/predictions", e.admin,
		map[string]any{"samples": []map[string]any{{"id": "x1", "responses": []float64{0.5}}, {"id": "x2", "responses": []float64{1e6}}}})
	post("/v1/curves/{id}/review", "/v1/curves/"+curve+"/review", e.admin, map[string]any{"decision": "approve", "reason": "checked"})
	post("/v1/curves/{id}/verifications", "/v1/curves/"+curve+"/verifications", e.admin, map[string]any{"kind": "continuing",
		"level": "CCV", "concentration": 2.0, "responses": []float64{100}, "acquired_at": baseTime.Add(1e9 * 3600).Format("2006-01-02T15:04:05Z")})
	get("/v1/results", "/v1/results", e.admin)
	get("/v1/curves/{id}/audit", "/v1/curves/"+curve+"/audit", e.admin)
	get("/v1/curves/{id}/verifications", "/v1/curves/"+curve+"/verifications", e.admin)
	get("/v1/instruments/{instrument}/curves/current", "/v1/instruments/photometer-7/curves/current?analyte=nitrate", e.admin)
	get("/v1/methods", "/v1/methods", e.admin)
	get("/v1/curves/{id}", "/v1/curves/00000000-0000-4000-8000-000000000000", e.admin)
	if err := os.MkdirAll(filepath.Join(dir, "captured"), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "captured", "responses.ts"), []byte(ts.String()), 0o644); err != nil {
		t.Fatal(err)
	}

	// tsc type-checks the captured responses and compiles the client.
	npx := func(args ...string) string {
		cmd := exec.Command("npx", args...)
		cmd.Dir = dir
		out, err := cmd.CombinedOutput()
		if err != nil {
			t.Fatalf("npx %s: %v\n%s", strings.Join(args, " "), err, out)
		}
		return string(out)
	}
	npx("tsc", "-p", "tsconfig.json")
	t.Logf("%d captured responses type-check against the generated types", n)

	// The generated client posts a CSV run; the server stores it as CSV.
	cmd := exec.Command("node", filepath.Join("build", "src", "csv-run.js"))
	cmd.Dir = dir
	cmd.Env = append(os.Environ(), "CURVEKEEPER_URL="+e.srv.URL, "CURVEKEEPER_TOKEN="+instrument,
		"CURVEKEEPER_METHOD=nitrate-uv", "CURVEKEEPER_INSTRUMENT=photometer-7")
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("csv-run.js: %v\n%s", err, out)
	}
	var got struct {
		Status     int      `json:"status"`
		ID         string   `json:"id"`
		Curves     []string `json:"curves"`
		ReadStatus int      `json:"read_status"`
		Format     string   `json:"format"`
		Standards  int      `json:"standards"`
		Remaining  string   `json:"ratelimit_remaining"`
	}
	if err := json.Unmarshal(out, &got); err != nil {
		t.Fatalf("csv-run.js printed %q: %v", out, err)
	}
	if got.Status != http.StatusCreated || got.ReadStatus != http.StatusOK || got.Format != "csv" ||
		got.Standards != 5 || !slices.Equal(got.Curves, []string{"nitrate"}) {
		t.Errorf("generated client's CSV run: %+v, want 201, read back 200 as csv with 5 standard levels and a nitrate curve", got)
	}
	if _, err := strconv.Atoi(got.Remaining); err != nil {
		t.Errorf("RateLimit-Remaining seen by the client = %q, want a number", got.Remaining)
	}
	// The stored run is the CSV's: read back here too.
	stored := decode[struct {
		Format string `json:"format"`
	}](t, e.get(t, instrument, "/v1/runs/"+got.ID), http.StatusOK)
	if stored.Format != "csv" {
		t.Errorf("run %s stored with format %q, want csv", got.ID, stored.Format)
	}
}
