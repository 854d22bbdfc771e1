package store_test

import (
	"context"
	"testing"
	"time"

	"curvekeeper/lab"
	"curvekeeper/store"
)

func TestSessions(t *testing.T) {
	ctx := context.Background()
	db := newDB(t)
	id, secret, err := db.CreateToken(ctx, "qa-anna", []string{lab.ScopeCurvesReview}, "admin-test")
	if err != nil {
		t.Fatal(err)
	}
	sess, tok, err := db.CreateSession(ctx, secret, time.Hour)
	if err != nil {
		t.Fatal(err)
	}
	if tok.TokenID != id || sess == "" || sess == secret {
		t.Fatalf("CreateSession = %q, %+v", sess, tok)
	}
	t.Run("only the hash is stored", func(t *testing.T) {
		var n int
		if err := db.Pool.QueryRow(ctx, `SELECT count(*) FROM ui_sessions WHERE id_hash = sha256($1::bytea)`, []byte(sess)).Scan(&n); err != nil {
			t.Fatal(err)
		}
		var plain int
		if err := db.Pool.QueryRow(ctx, `SELECT count(*) FROM ui_sessions WHERE position($1::bytea in id_hash) > 0`, []byte(sess)).Scan(&plain); err != nil {
			t.Fatal(err)
		}
		if n != 1 || plain != 0 {
			t.Errorf("rows by hash = %d (want 1), rows holding the secret = %d (want 0)", n, plain)
		}
	})
	t.Run("lookup carries the token's scopes", func(t *testing.T) {
		s, err := db.LookupSession(ctx, sess)
		if err != nil {
			t.Fatal(err)
		}
		if s.Token.TokenID != id || len(s.Token.Scopes) != 1 || s.Token.Scopes[0] != lab.ScopeCurvesReview || !s.ExpiresAt.After(time.Now()) {
			t.Errorf("session %+v", s)
		}
	})
	t.Run("bad token and bad lifetime", func(t *testing.T) {
		_, _, err := db.CreateSession(ctx, "ck_not-a-token", time.Hour)
		wantKind(t, err, lab.KindNotFound)
		_, _, err = db.CreateSession(ctx, secret, 48*time.Hour)
		wantKind(t, err, lab.KindInvalid)
		_, err = db.LookupSession(ctx, "ck_nothing")
		wantKind(t, err, lab.KindNotFound)
	})
	t.Run("expired sessions are refused", func(t *testing.T) {
		s2, _, err := db.CreateSession(ctx, secret, time.Hour)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := db.Pool.Exec(ctx, `UPDATE ui_sessions SET created_at = now() - interval '3 hours', expires_at = now() - interval '1 hour' WHERE id_hash = sha256($1::bytea)`, []byte(s2)); err != nil {
			t.Fatal(err)
		}
		_, err = db.LookupSession(ctx, s2)
		wantKind(t, err, lab.KindNotFound)
	})
	t.Run("sign-out deletes, twice is harmless, and is audited", func(t *testing.T) {
		s3, _, err := db.CreateSession(ctx, secret, time.Hour)
		if err != nil {
			t.Fatal(err)
		}
		for i := 0; i < 2; i++ {
			if err := db.DeleteSession(ctx, s3); err != nil {
				t.Fatal(err)
			}
		}
		_, err = db.LookupSession(ctx, s3)
		wantKind(t, err, lab.KindNotFound)
		var n int
		if err := db.Pool.QueryRow(ctx, `SELECT count(*) FROM audit WHERE action = $1 AND entity_id = $2`, store.ActionSessionDelete, id).Scan(&n); err != nil {
			t.Fatal(err)
		}
		if n != 1 {
			t.Errorf("%d sign-out audit rows, want 1", n)
		}
	})
	t.Run("revoking the token ends its sessions", func(t *testing.T) {
		if err := db.RevokeToken(ctx, id, "admin-test"); err != nil {
			t.Fatal(err)
		}
		_, err := db.LookupSession(ctx, sess)
		wantKind(t, err, lab.KindNotFound)
	})
}
