package store_test

import (
	"context"
	"fmt"
	"slices"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"curvekeeper/lab"
)

// Many concurrent lookups, coalesced into shared statements, each get the
// answer a lookup of their own would give: the right token for each secret,
// not-found for unknown and revoked secrets, and the status of the curve each
// asked about (or none).
func TestCoalescedLookupsAnswerEachCaller(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)
	created, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatalf("CreateRun: %v", err)
	}
	curveID := created.Curves[0].ID
	wantStatus, err := db.CurveStatus(ctx, curveID)
	if err != nil {
		t.Fatalf("CurveStatus: %v", err)
	}
	const missingCurve = "0190a0b0-0000-7000-8000-000000000000"

	type tok struct {
		id, secret string
		scopes     []string
	}
	var live []tok
	for i, scopes := range [][]string{{lab.ScopeRunsWrite}, {lab.ScopeResultsRead}, {lab.ScopeAdmin}} {
		id, secret, err := db.CreateToken(ctx, fmt.Sprintf("client-%d", i), scopes, "admin-test")
		if err != nil {
			t.Fatalf("CreateToken: %v", err)
		}
		live = append(live, tok{id, secret, scopes})
	}
	revokedID, revoked, err := db.CreateToken(ctx, "retired", []string{lab.ScopeAdmin}, "admin-test")
	if err != nil {
		t.Fatalf("CreateToken: %v", err)
	}
	if err := db.RevokeToken(ctx, revokedID, "admin-test"); err != nil {
		t.Fatalf("RevokeToken: %v", err)
	}

	var wg sync.WaitGroup
	errs := make(chan error, 1000)
	for g := range 50 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range 40 {
				k := (g + i) % 6
				switch {
				case k < 3: // a live token, with a curve, a missing curve or none
					curve := []string{curveID, missingCurve, ""}[i%3]
					var (
						got    lab.Principal
						status string
						err    error
					)
					if curve == "" {
						got, err = db.LookupToken(ctx, live[k].secret)
					} else {
						got, status, err = db.LookupTokenAndCurveStatus(ctx, live[k].secret, curve)
					}
					want := ""
					if curve == curveID {
						want = wantStatus
					}
					if err != nil || got.TokenID != live[k].id || !slices.Equal(got.Scopes, live[k].scopes) || status != want {
						errs <- fmt.Errorf("token %d curve %q: got %+v status %q err %v, want id %s scopes %v status %q",
							k, curve, got, status, err, live[k].id, live[k].scopes, want)
					}
				case k == 3:
					_, _, err := db.LookupTokenAndCurveStatus(ctx, revoked, curveID)
					if lab.KindOf(err) != lab.KindNotFound {
						errs <- fmt.Errorf("revoked token: err %v, want not found", err)
					}
				default:
					_, err := db.LookupToken(ctx, fmt.Sprintf("ck_unknown-%d-%d-padding-padding", g, i))
					if lab.KindOf(err) != lab.KindNotFound {
						errs <- fmt.Errorf("unknown token: err %v, want not found", err)
					}
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	n := 0
	for err := range errs {
		if n < 10 {
			t.Error(err)
		}
		n++
	}
	if n > 0 {
		t.Errorf("%d of 2000 lookups answered wrongly", n)
	}
}

// A revocation holds from the next request on even while lookups are being
// coalesced: no lookup that began after RevokeToken returned may succeed.
// (A coalescer that let a caller join a statement already in flight would
// let such a lookup through, answered from before the revocation.)
func TestCoalescedLookupsSeeRevocationAtOnce(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	for round := range 5 {
		id, secret, err := db.CreateToken(ctx, fmt.Sprintf("lims-%d", round), []string{lab.ScopeResultsRead}, "admin-test")
		if err != nil {
			t.Fatalf("CreateToken: %v", err)
		}
		var (
			revokedAt atomic.Int64 // UnixNano after RevokeToken returned; 0 before
			stop      atomic.Bool
			before    atomic.Int64 // successes that began before the revocation returned
			late      atomic.Int64 // successes that began after it: must stay 0
			refused   atomic.Int64
			wg        sync.WaitGroup
		)
		for range 32 {
			wg.Add(1)
			go func() {
				defer wg.Done()
				for !stop.Load() {
					r := revokedAt.Load()
					_, err := db.LookupToken(ctx, secret)
					switch {
					case err == nil && r != 0:
						late.Add(1)
					case err == nil:
						before.Add(1)
					case lab.KindOf(err) == lab.KindNotFound:
						refused.Add(1)
					default:
						t.Errorf("LookupToken: %v", err)
						return
					}
				}
			}()
		}
		time.Sleep(100 * time.Millisecond)
		if err := db.RevokeToken(ctx, id, "admin-test"); err != nil {
			t.Fatalf("RevokeToken: %v", err)
		}
		revokedAt.Store(time.Now().UnixNano())
		time.Sleep(100 * time.Millisecond)
		stop.Store(true)
		wg.Wait()
		if late.Load() != 0 {
			t.Errorf("round %d: %d lookups that began after the revocation returned were accepted", round, late.Load())
		}
		if before.Load() == 0 || refused.Load() == 0 {
			t.Errorf("round %d: %d accepted before, %d refused after: the test did not exercise both sides", round, before.Load(), refused.Load())
		}
	}
}
