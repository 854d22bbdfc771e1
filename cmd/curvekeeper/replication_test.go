package main

import (
	"context"
	"encoding/json"
	"io"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

const replAdmin = "ck_test_repl_admin_0123456789abcdef0123"

func storeAdmin(t *testing.T, p *dbtest.Pair) {
	t.Helper()
	db, err := store.Open(context.Background(), p.PrimaryURL)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, _, err := db.EnsureToken(context.Background(), "admin", replAdmin, []string{"admin"}); err != nil {
		t.Fatal(err)
	}
	p.CatchUp(t)
}

func readyMode(t *testing.T, addr string) string {
	t.Helper()
	resp, err := http.Get("http://" + addr + "/readyz")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	var r struct{ Mode string }
	_ = json.NewDecoder(resp.Body).Decode(&r)
	return r.Mode
}

// postToken creates a token through the API and returns the status and the
// new token's id.
func postToken(t *testing.T, addr, name string) (int, string) {
	t.Helper()
	req, _ := http.NewRequest(http.MethodPost, "http://"+addr+"/v1/tokens", strings.NewReader(`{"name":"`+name+`","scopes":["results:read"]}`))
	req.Header.Set("Authorization", "Bearer "+replAdmin)
	req.Header.Set("Content-Type", "application/json")
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	var tc struct{ ID string }
	_ = json.Unmarshal(b, &tc)
	return resp.StatusCode, tc.ID
}

// TestServeStandbyUntilPromoted starts the service on a standby: it skips
// the migrations and the bootstrap token, says read-only, refuses a write
// with 503; after pg_ctl promote its periodic check makes it writable.
func TestServeStandbyUntilPromoted(t *testing.T) {
	t.Parallel()
	p := dbtest.NewReplicaPair(t, dbtest.PairOptions{})
	storeAdmin(t, p)
	s := startService(t, map[string]string{"DATABASE_URL": p.StandbyURL, "CURVEKEEPER_BOOTSTRAP_TOKEN": "ck_test_other_bootstrap_0123456789abcdef"},
		"--replica-check-interval", "50ms")
	if m := readyMode(t, s.addr); m != "read-only" {
		t.Fatalf("/readyz mode %q, want read-only", m)
	}
	for _, want := range []string{"migrations skipped", "bootstrap token not stored"} {
		if !strings.Contains(s.stderr.String(), want) {
			t.Errorf("log lacks %q", want)
		}
	}
	if st, _ := postToken(t, s.addr, "refused"); st != http.StatusServiceUnavailable {
		t.Fatalf("write on the standby: %d, want 503", st)
	}
	if err := p.Standby.Promote(context.Background()); err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(20 * time.Second)
	for readyMode(t, s.addr) != "read-write" {
		if time.Now().After(deadline) {
			t.Fatalf("still read-only 20 s after promotion; log:\n%s", s.stderr.String())
		}
		time.Sleep(20 * time.Millisecond)
	}
	if st, _ := postToken(t, s.addr, "after-promotion"); st != http.StatusCreated {
		t.Fatalf("write after promotion: %d, want 201", st)
	}
}

// TestRemoteApplyLosesNoAcknowledgedWrite runs the service on the primary
// with synchronous_commit=remote_apply (a URL parameter) and the standby as
// its read replica and synchronous standby. Every acknowledged write is
// visible on the standby the moment it is acknowledged (checked at once,
// without waiting), and all of them are on the standby after it is
// promoted: an acknowledged write cannot be lost by failing over to it.
func TestRemoteApplyLosesNoAcknowledgedWrite(t *testing.T) {
	t.Parallel()
	p := dbtest.NewReplicaPair(t, dbtest.PairOptions{Sync: true})
	storeAdmin(t, p)
	s := startService(t, nil, "--database-url", p.PrimaryURL+"&synchronous_commit=remote_apply",
		"--database-read-url", p.StandbyURL, "--replica-check-interval", "50ms")
	ctx := context.Background()
	sb, err := pgx.Connect(ctx, p.StandbyURL)
	if err != nil {
		t.Fatal(err)
	}
	defer sb.Close(ctx)
	var syncState string
	if err := sb.QueryRow(ctx, `SELECT 1`).Scan(new(int)); err != nil {
		t.Fatal(err)
	}
	prim, err := pgx.Connect(ctx, p.PrimaryURL)
	if err != nil {
		t.Fatal(err)
	}
	defer prim.Close(ctx)
	if err := prim.QueryRow(ctx, `SELECT sync_state FROM pg_stat_replication WHERE application_name = $1`, dbtest.SyncStandbyName).Scan(&syncState); err != nil || syncState != "sync" {
		t.Fatalf("the standby's sync_state on the primary: %q, %v; want sync", syncState, err)
	}
	const writes = 20
	var acked []string
	visible := 0
	for i := range writes {
		st, id := postToken(t, s.addr, "acked-"+string(rune('a'+i)))
		if st != http.StatusCreated {
			t.Fatalf("write %d: %d", i, st)
		}
		acked = append(acked, id)
		var seen bool
		if err := sb.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM tokens WHERE id = $1)`, id).Scan(&seen); err != nil {
			t.Fatal(err)
		}
		if seen {
			visible++
		} else {
			t.Errorf("write %d (%s) acknowledged but not yet visible on the synchronous standby", i, id)
		}
	}
	if err := p.Standby.Promote(ctx); err != nil {
		t.Fatal(err)
	}
	var n int
	if err := sb.QueryRow(ctx, `SELECT count(*) FROM tokens WHERE id = ANY($1)`, acked).Scan(&n); err != nil {
		t.Fatal(err)
	}
	if n != writes {
		t.Errorf("promoted standby holds %d of %d acknowledged writes", n, writes)
	}
	t.Logf("remote_apply: %d acknowledged writes, %d visible on the standby at acknowledgement, %d after promotion", writes, visible, n)
}
