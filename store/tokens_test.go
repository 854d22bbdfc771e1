package store_test

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/base64"
	"slices"
	"strings"
	"testing"

	"curvekeeper/lab"
	"curvekeeper/store"
)

func TestCreateTokenStoresOnlyTheHash(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	id, secret, err := db.CreateToken(ctx, "ic-02 uploader", []string{lab.ScopeRunsWrite, lab.ScopeResultsRead}, "admin-test")
	if err != nil {
		t.Fatalf("CreateToken: %v", err)
	}
	if !strings.HasPrefix(secret, store.TokenPrefix) {
		t.Errorf("secret %q lacks prefix %q", secret, store.TokenPrefix)
	}
	raw, err := base64.RawURLEncoding.DecodeString(strings.TrimPrefix(secret, store.TokenPrefix))
	if err != nil || len(raw) != 32 {
		t.Errorf("secret body decodes to %d bytes (err %v), want 32", len(raw), err)
	}

	var stored []byte
	if err := db.Pool.QueryRow(ctx, `SELECT hash FROM tokens WHERE id = $1`, id).Scan(&stored); err != nil {
		t.Fatalf("select hash: %v", err)
	}
	want := sha256.Sum256([]byte(secret))
	if !bytes.Equal(stored, want[:]) {
		t.Errorf("stored hash %x, want SHA-256 of the secret %x", stored, want)
	}
	if bytes.Contains(stored, []byte(secret)) || bytes.Equal(stored, []byte(secret)) {
		t.Errorf("stored hash contains the secret")
	}
	var leaks int
	if err := db.Pool.QueryRow(ctx, `SELECT count(*) FROM tokens t WHERE position($1 in t::text) > 0`, secret).Scan(&leaks); err != nil {
		t.Fatalf("search for secret: %v", err)
	}
	if leaks != 0 {
		t.Errorf("the secret appears in %d token rows", leaks)
	}

	got, err := db.LookupToken(ctx, secret)
	if err != nil {
		t.Fatalf("LookupToken: %v", err)
	}
	if got.TokenID != id || got.Name != "ic-02 uploader" || !slices.Equal(got.Scopes, []string{lab.ScopeRunsWrite, lab.ScopeResultsRead}) {
		t.Errorf("LookupToken = %+v, want id %s with runs:write, results:read", got, id)
	}
	if !got.Has(lab.ScopeRunsWrite) || got.Has(lab.ScopeCurvesReview) {
		t.Errorf("HasScope wrong for %v", got.Scopes)
	}
	_, err = db.LookupToken(ctx, secret+"x")
	wantKind(t, err, lab.KindNotFound)
}

func TestRevokedTokenIsRefused(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	id, secret, err := db.CreateToken(ctx, "qa", []string{lab.ScopeCurvesReview}, "admin-test")
	if err != nil {
		t.Fatalf("CreateToken: %v", err)
	}
	if err := db.RevokeToken(ctx, id, "admin-test"); err != nil {
		t.Fatalf("RevokeToken: %v", err)
	}
	_, err = db.LookupToken(ctx, secret)
	wantKind(t, err, lab.KindNotFound)

	if err := db.RevokeToken(ctx, id, "admin-test"); err != nil {
		t.Errorf("second RevokeToken = %v, want nil (no change)", err)
	}
	var revokes int
	if err := db.Pool.QueryRow(ctx, `SELECT count(*) FROM audit WHERE action = 'token.revoke' AND entity_id = $1`, id).Scan(&revokes); err != nil {
		t.Fatal(err)
	}
	if revokes != 1 {
		t.Errorf("revoke audit rows = %d, want 1", revokes)
	}
	wantKind(t, db.RevokeToken(ctx, "0190a1b2-0000-7000-8000-000000000000", "admin-test"), lab.KindNotFound)
	wantKind(t, db.RevokeToken(ctx, "not-a-uuid", "admin-test"), lab.KindNotFound)

	_, err = db.Pool.Exec(ctx, `UPDATE tokens SET revoked_at = NULL WHERE id = $1`, id)
	if err == nil {
		t.Errorf("un-revoking a token succeeded, want the trigger to refuse it")
	}
}

func TestCreateTokenRefusesBadInput(t *testing.T) {
	db := newDB(t)
	tests := []struct {
		name, tokenName, field string
		scopes                 []string
	}{
		{"empty name", " ", "/name", []string{lab.ScopeAdmin}},
		{"no scopes", "x", "/scopes", nil},
		{"unknown scope", "x", "/scopes/1", []string{lab.ScopeAdmin, "root"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, _, err := db.CreateToken(context.Background(), tt.tokenName, tt.scopes, "admin-test")
			wantKind(t, err, lab.KindInvalid)
			if got := err.(*lab.Error).Field; got != tt.field {
				t.Errorf("field = %q, want %q", got, tt.field)
			}
		})
	}
	if got := count(t, db, "tokens"); got != 0 {
		t.Errorf("tokens stored = %d, want 0", got)
	}
}

func TestEnsureTokenIsIdempotent(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	secret := "bootstrap-secret-for-the-test-0123456789"
	id1, created1, err := db.EnsureToken(ctx, "bootstrap", secret, []string{lab.ScopeAdmin})
	if err != nil || !created1 {
		t.Fatalf("first EnsureToken = %s, %v, %v; want created", id1, created1, err)
	}
	id2, created2, err := db.EnsureToken(ctx, "bootstrap", secret, []string{lab.ScopeAdmin})
	if err != nil || created2 || id2 != id1 {
		t.Fatalf("second EnsureToken = %s, %v, %v; want %s, not created", id2, created2, err, id1)
	}
	tok, err := db.LookupToken(ctx, secret)
	if err != nil || tok.TokenID != id1 || !tok.Has(lab.ScopeCurvesReview) {
		t.Errorf("LookupToken = %+v, %v; want the admin token %s", tok, err, id1)
	}
	if got := count(t, db, "tokens"); got != 1 {
		t.Errorf("tokens = %d, want 1", got)
	}
	_, _, err = db.EnsureToken(ctx, "bootstrap", "short", []string{lab.ScopeAdmin})
	wantKind(t, err, lab.KindInvalid)
}

func TestLiveTokensCreatedBy(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	a, _, err := db.CreateToken(ctx, "loader-a", []string{lab.ScopeAdmin}, "loader")
	if err != nil {
		t.Fatal(err)
	}
	b, _, err := db.CreateToken(ctx, "loader-b", []string{lab.ScopeResultsRead}, "loader")
	if err != nil {
		t.Fatal(err)
	}
	if _, _, err := db.CreateToken(ctx, "someone else's", []string{lab.ScopeResultsRead}, "admin-test"); err != nil {
		t.Fatal(err)
	}
	got, err := db.LiveTokensCreatedBy(ctx, "loader")
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 || got[0].TokenID != a || got[1].TokenID != b || got[1].Name != "loader-b" ||
		!slices.Equal(got[1].Scopes, []string{lab.ScopeResultsRead}) {
		t.Errorf("LiveTokensCreatedBy = %+v, want loader-a (%s) then loader-b (%s)", got, a, b)
	}
	if err := db.RevokeToken(ctx, a, "loader"); err != nil {
		t.Fatal(err)
	}
	got, err = db.LiveTokensCreatedBy(ctx, "loader")
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 1 || got[0].TokenID != b {
		t.Errorf("after revoking %s: %+v, want only %s", a, got, b)
	}
	if got, err := db.LiveTokensCreatedBy(ctx, "nobody"); err != nil || len(got) != 0 {
		t.Errorf("LiveTokensCreatedBy(nobody) = %v, %v; want none", got, err)
	}
}
