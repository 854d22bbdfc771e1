package api_test

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"net/http"
	"slices"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/getkin/kin-openapi/openapi3"

	"curvekeeper/api"
	"curvekeeper/api/oapi"
	"curvekeeper/openapi"
)

// snapshot is every table's row count and a digest of its rows: a write
// that changed anything (a row, a status, a revocation, an audit row, a feed
// event) changes it. The QA pages' sessions are left out.
type snapshot map[string]string

var snapshotTables = []string{"tokens", "methods", "runs", "readings", "run_samples", "curves", "reviews", "audit",
	"idempotency_keys", "sample_results", "result_events", "verifications", "exclusions", "people", "signatures",
	"standard_materials", "run_standard_materials"}

func (e *env) snapshot(t testing.TB) snapshot {
	t.Helper()
	out := snapshot{}
	for _, table := range snapshotTables {
		var n int
		var digest string
		err := e.db.Pool.QueryRow(context.Background(),
			`SELECT count(*), coalesce(md5(string_agg(t::text, '|' ORDER BY t::text)), '') FROM `+table+` t`).Scan(&n, &digest)
		if err != nil {
			t.Fatalf("snapshot %s: %v", table, err)
		}
		out[table] = fmt.Sprintf("%d rows %s", n, digest[:min(8, len(digest))])
	}
	return out
}

func (s snapshot) diff(other snapshot) string {
	var changed []string
	for _, k := range snapshotTables {
		if s[k] != other[k] {
			changed = append(changed, fmt.Sprintf("%s (%s → %s)", k, s[k], other[k]))
		}
	}
	return strings.Join(changed, "; ")
}

// writeOps are the operations of the spec that write: every one that is not
// a GET, but the predictions and the recalculation, which compute and store
// nothing (their descriptions say so).
func writeOps(t *testing.T) []string {
	t.Helper()
	var out []string
	for id, op := range specScopes(t) {
		if op.method != http.MethodGet && !strings.Contains(id, "Prediction") && id != "recalculateCurve" {
			out = append(out, id)
		}
	}
	slices.Sort(out)
	return out
}

// specKeyedOps are the operations that declare the Idempotency-Key header.
func specKeyedOps(t *testing.T) []string {
	t.Helper()
	doc, err := openapi3.NewLoader().LoadFromData(openapi.YAML)
	if err != nil {
		t.Fatalf("load spec: %v", err)
	}
	var out []string
	for _, item := range doc.Paths.Map() {
		for _, op := range item.Operations() {
			for _, p := range op.Parameters {
				if p.Value != nil && p.Value.In == "header" && p.Value.Name == "Idempotency-Key" {
					out = append(out, op.OperationID)
				}
			}
		}
	}
	slices.Sort(out)
	return out
}

// csvRunFixture is a CSV run on photometer-7 (a fresh acquisition time per
// call).
func csvRunFixture(e *env) func(t *testing.T) (call, int) {
	n := 0
	return func(t *testing.T) (call, int) {
		n++
		csv, _ := nitrateCSV(uint64(40 + n))
		at := baseTime.AddDate(0, 2, n).Format(time.RFC3339)
		return call{method: http.MethodPost, path: csvPath("nitrate-uv", "photometer-7", at), contentType: "text/csv", body: []byte(csv)}, http.StatusCreated
	}
}

// TestAnUnansweredWriteLeavesNothing: for every write route (runs as JSON
// and as CSV), when the answer cannot be made (an injected failure after
// the handler's SQL ran and its answer was encoded, before the commit) the
// client gets 500 and nothing changed: no row, no status, no audit row, no
// feed event. The same request then succeeds, so the failure was the only
// reason for the 500.
func TestAnUnansweredWriteLeavesNothing(t *testing.T) {
	t.Parallel()
	e := newEnvConfig(t, api.Config{AuthFailureBurst: -1})
	fixtures := routeFixtures(t, e)
	fixtures["createRun (CSV)"] = csvRunFixture(e)
	var failing atomic.Bool
	api.SetAnswerFault(e.api, func(op string) error {
		if failing.Load() {
			return errors.New("injected: the answer of " + op + " could not be made")
		}
		return nil
	})
	ops := append(writeOps(t), "createRun (CSV)")
	for _, op := range ops {
		t.Run(op, func(t *testing.T) {
			c, want := fixtures[op](t)
			c.token = e.admin
			if op == "unlockPerson" { // something to unlock: one failed sign-in
				if _, err := e.db.Pool.Exec(context.Background(), `UPDATE people SET failed_attempts = 1 WHERE login = 'matrix-qa'`); err != nil {
					t.Fatal(err)
				}
			}
			before := e.snapshot(t)
			failing.Store(true)
			r := e.do(t, c)
			failing.Store(false)
			if r.status != http.StatusInternalServerError {
				t.Fatalf("with the answer failing: %s, want 500", r)
			}
			if d := before.diff(e.snapshot(t)); d != "" {
				t.Errorf("answered 500 but changed %s", d)
			}
			if r := e.do(t, c); r.status != want {
				t.Fatalf("the same request without the failure: %s, want %d", r, want)
			}
			if before.diff(e.snapshot(t)) == "" {
				t.Errorf("the write changed nothing when it succeeded, so the check above proves nothing")
			}
		})
	}
}

// TestIdempotencyKeyOnEveryWrite: every POST that stores a record takes an
// Idempotency-Key with the semantics of runs: the same key and request are
// answered with the stored answer and write nothing; the key on another
// request is 422. A token's secret is never stored, so its replay is 409.
func TestIdempotencyKeyOnEveryWrite(t *testing.T) {
	t.Parallel()
	e := newEnvConfig(t, api.Config{AuthFailureBurst: -1})
	fixtures := routeFixtures(t, e)
	keyed := specKeyedOps(t)
	if len(keyed) < 10 {
		t.Fatalf("only %d operations declare Idempotency-Key: %v", len(keyed), keyed)
	}
	for _, op := range keyed {
		if op == "createRun" || op == "createRunCsv" {
			continue // runs have their own tests (runs_test.go, csvroute_test.go)
		}
		t.Run(op, func(t *testing.T) {
			key := "retry-" + op
			c, want := fixtures[op](t)
			c.token, c.header = e.admin, map[string]string{"Idempotency-Key": key}
			first := e.do(t, c)
			if first.status != want || first.header.Get("Idempotency-Replayed") != "false" {
				t.Fatalf("first: %s (Idempotency-Replayed %q), want %d", first, first.header.Get("Idempotency-Replayed"), want)
			}
			stored := e.snapshot(t)
			again := e.do(t, c)
			if d := stored.diff(e.snapshot(t)); d != "" {
				t.Errorf("the retry changed %s", d)
			}
			if op == "createToken" {
				wantProblem(t, again, http.StatusConflict, "header:Idempotency-Key")
				return
			}
			if again.status != first.status || !bytes.Equal(again.body, first.body) ||
				again.header.Get("Location") != first.header.Get("Location") || again.header.Get("Idempotency-Replayed") != "true" {
				t.Errorf("retry: %s (Location %q, Idempotency-Replayed %q), want the first answer %s (Location %q) replayed",
					again, again.header.Get("Location"), again.header.Get("Idempotency-Replayed"), first, first.header.Get("Location"))
			}
			other, _ := fixtures[op](t)
			if other.path == c.path && bytes.Equal(other.body, c.body) {
				return // the fixture makes the same request each time: nothing to refuse
			}
			other.token, other.header = e.admin, map[string]string{"Idempotency-Key": key}
			before := e.snapshot(t)
			wantProblem(t, e.do(t, other), http.StatusUnprocessableEntity, "header:Idempotency-Key")
			if d := before.diff(e.snapshot(t)); d != "" {
				t.Errorf("the refused reuse changed %s", d)
			}
		})
	}
}

// TestVerificationPostedTwiceIsStoredOnce: a middleware that retries a
// verification standard after a timeout sends it twice with one key; it is
// stored, and counted in the curve's verifications, once.
func TestVerificationPostedTwiceIsStoredOnce(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	run := e.nitrateCurve(t)
	curve := "/v1/curves/" + run.Curves[0].ID.String()
	ccv := map[string]any{"kind": "continuing", "level": "CCV", "concentration": 2, "responses": []float64{1.04},
		"acquired_at": baseTime.Add(time.Hour).Format(time.RFC3339)}
	first := decode[oapi.CreateVerification201JSONResponse](t, e.postJSON(t, e.admin, curve+"/verifications", ccv, "Idempotency-Key", "ccv-0930"), http.StatusCreated)
	again := decode[oapi.CreateVerification201JSONResponse](t, e.postJSON(t, e.admin, curve+"/verifications", ccv, "Idempotency-Key", "ccv-0930"), http.StatusCreated)
	if again.Verification.ID != first.Verification.ID {
		t.Errorf("the retry stored verification %s beside %s", again.Verification.ID, first.Verification.ID)
	}
	list := decode[oapi.VerificationList](t, e.get(t, e.admin, curve+"/verifications"), http.StatusOK)
	if len(list.Verifications) != 1 {
		t.Errorf("%d verifications after one posted twice with one key, want 1", len(list.Verifications))
	}
	// The same key with another body is refused and stores nothing.
	ccv["responses"] = []float64{1.05}
	wantProblem(t, e.postJSON(t, e.admin, curve+"/verifications", ccv, "Idempotency-Key", "ccv-0930"), http.StatusUnprocessableEntity, "header:Idempotency-Key")
	// One key names one request whatever the route: a run is refused too.
	wantProblem(t, e.postJSON(t, e.admin, "/v1/runs", runBody("nitrate-uv", "photometer-7", baseTime.Add(2*time.Hour), standards("nitrate", 5)),
		"Idempotency-Key", "ccv-0930"), http.StatusUnprocessableEntity, "header:Idempotency-Key")
	// Without a key a second post is a second verification, as before.
	if r := e.postJSON(t, e.admin, curve+"/verifications", ccv); r.status != http.StatusCreated {
		t.Fatalf("verification without a key: %s", r)
	}
	if list := decode[oapi.VerificationList](t, e.get(t, e.admin, curve+"/verifications"), http.StatusOK); len(list.Verifications) != 2 {
		t.Errorf("%d verifications, want 2", len(list.Verifications))
	}
}

// TestFailedSigningIsCountedInsideAWrite: a wrong password on a signature
// is refused and the refusal rolls the write back, but the failure itself
// is counted (the account's lockout needs it), in a transaction of its own.
func TestFailedSigningIsCountedInsideAWrite(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	run := e.nitrateCurve(t)
	e.person(t, "sam", "Sam Signer", "reviewer", "qa-approver")
	wantProblemAtLeast(t, e.postJSON(t, e.admin, "/v1/curves/"+run.Curves[0].ID.String()+"/signatures",
		map[string]any{"login": "sam", "password": "not-sams-password", "meaning": "review"}), 400)
	var failed int
	if err := e.db.Pool.QueryRow(context.Background(), `SELECT failed_attempts FROM people WHERE login = 'sam'`).Scan(&failed); err != nil {
		t.Fatal(err)
	}
	if failed != 1 {
		t.Errorf("failed_attempts %d after one wrong password, want 1", failed)
	}
}
