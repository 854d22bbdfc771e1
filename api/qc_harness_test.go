package api_test

// The harness of the results and QC tests: a real server (httptest over
// api.New) on a fresh migrated PostgreSQL per test; every response is
// checked against openapi/openapi.yaml with apitest. Names carry a qc prefix
// so that they stay apart from the other suites of this package.

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"curvekeeper/api"
	"curvekeeper/api/apitest"
	"curvekeeper/lab"
	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

const qcAdminSecret = "ck_test_qc_admin_0123456789abcdef0123"

type qcEnv struct {
	t     *testing.T
	db    *store.DB
	srv   *httptest.Server
	admin string
}

func newQCEnv(t *testing.T) *qcEnv {
	t.Helper()
	db := dbtest.NewDB(t)
	var logs bytes.Buffer
	s, err := api.New(api.Config{}, lab.NewService(db, testClock), slog.New(slog.NewTextHandler(&logs, nil)))
	if err != nil {
		t.Fatalf("api.New: %v", err)
	}
	srv := httptest.NewServer(s.Handler())
	t.Cleanup(func() {
		srv.Close()
		if t.Failed() {
			t.Logf("server log:\n%s", logs.String())
		}
	})
	if _, _, err := db.EnsureToken(context.Background(), "qc-admin", qcAdminSecret, []string{lab.ScopeAdmin}); err != nil {
		t.Fatalf("EnsureToken: %v", err)
	}
	return &qcEnv{t: t, db: db, srv: srv, admin: qcAdminSecret}
}

// do sends body (marshalled unless it is nil) and returns the status and the
// body, after checking the response against the spec.
func (e *qcEnv) do(method, path, token string, body any) (int, []byte) {
	e.t.Helper()
	var rd io.Reader
	var raw []byte
	if body != nil {
		var err error
		if raw, err = json.Marshal(body); err != nil {
			e.t.Fatal(err)
		}
		rd = bytes.NewReader(raw)
	}
	req, err := http.NewRequest(method, e.srv.URL+path, rd)
	if err != nil {
		e.t.Fatal(err)
	}
	if body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	req.Header.Set("Authorization", "Bearer "+token)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		e.t.Fatalf("%s %s: %v", method, path, err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		e.t.Fatal(err)
	}
	// apitest validates against the request as sent; give it the body again.
	check, _ := http.NewRequest(method, e.srv.URL+path, bytes.NewReader(raw))
	check.Header = req.Header
	apitest.ValidateResponse(e.t, check, resp, b)
	return resp.StatusCode, b
}

// must is do that fails the test unless the status is want.
func (e *qcEnv) must(want int, method, path, token string, body any) []byte {
	e.t.Helper()
	got, b := e.do(method, path, token, body)
	if got != want {
		e.t.Fatalf("%s %s: status %d, want %d: %s", method, path, got, want, b)
	}
	return b
}

// token issues a token with the given scopes.
func (e *qcEnv) token(name string, scopes ...string) string {
	e.t.Helper()
	var out struct{ Token string }
	qcDecode(e.t, e.must(201, "POST", "/v1/tokens", e.admin, map[string]any{"name": name, "scopes": scopes}), &out)
	return out.Token
}

func qcDecode(t *testing.T, b []byte, v any) {
	t.Helper()
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("decode %T: %v: %s", v, err, b)
	}
}

// qcProblem is the part of a problem the tests look at.
type qcProblem struct {
	Status int
	Detail string
	Errors []struct{ Pointer, Detail string }
}

// wantRule fails unless the problem names pointer with a detail naming
// rule ("" matches any detail).
func wantRule(t *testing.T, b []byte, pointer, rule string) {
	t.Helper()
	var p qcProblem
	qcDecode(t, b, &p)
	for _, f := range p.Errors {
		if f.Pointer == pointer && (rule == "" || strings.Contains(f.Detail, rule)) {
			return
		}
	}
	t.Errorf("problem does not name %s with rule %q: %s", pointer, rule, b)
}

// qcStandards are levels L1..Ln on the invented line response = 0.01 + 0.2·c
// (two replicates with small alternating offsets); bad multiplies one reading
// (level index, replicate index) by 1.6 when set.
func qcStandards(concs []float64, bad *[2]int) []map[string]any {
	var out []map[string]any
	for i, c := range concs {
		y := 0.01 + 0.2*c
		var rs []float64
		for r := 0; r < 2; r++ {
			f := 1 + 0.006*float64((i+r)%3-1)
			if bad != nil && bad[0] == i && bad[1] == r {
				f = 1.6
			}
			rs = append(rs, y*f)
		}
		out = append(out, map[string]any{"analyte": "nitrate", "level": fmt.Sprintf("L%d", i+1), "concentration": c, "responses": rs})
	}
	return out
}

// qcTime is a moment of the invented batch: minutes after 08:00 on a day.
func qcTime(minutes int) time.Time {
	return time.Date(2031, 5, 6, 8, 0, 0, 0, time.UTC).Add(time.Duration(minutes) * time.Minute)
}

func qcStamp(minutes int) string { return qcTime(minutes).Format(time.RFC3339) }
