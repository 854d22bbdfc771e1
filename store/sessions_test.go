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

// A person signs in with login and password: the session carries the
// scopes of the person's roles and a person's actor, and ends when the
// person is disabled; a wrong password opens none and counts a failure.
func TestPersonSessions(t *testing.T) {
	ctx := context.Background()
	db := newDB(t)
	svc := lab.NewService(db)
	svc.People.SessionTTL = 2 * time.Hour
	mustPerson(t, svc, "rosa", "Rosa Reviewer", lab.RoleReviewer)
	if _, _, err := svc.SignInPerson(ctx, lab.Credentials{Login: "rosa", Password: "wrong-password"}); lab.KindOf(err) != lab.KindForbidden {
		t.Fatalf("wrong password: %v, want forbidden", err)
	}
	secret, person, err := svc.SignInPerson(ctx, creds("rosa"))
	if err != nil {
		t.Fatal(err)
	}
	if person.FailedAttempts != 0 {
		t.Errorf("a good password left %d failures", person.FailedAttempts)
	}
	s, err := db.LookupSession(ctx, secret)
	if err != nil {
		t.Fatal(err)
	}
	p := s.Token
	if !p.IsPerson() || p.Actor() != "person:rosa" || s.PrintedName != "Rosa Reviewer" ||
		!p.Has(lab.ScopeCurvesReview) || !p.Has(lab.ScopeResultsRead) || p.Has(lab.ScopeRunsWrite) || p.Has(lab.ScopeAdmin) {
		t.Errorf("person session %+v (actor %s)", s, p.Actor())
	}
	var lifetime time.Duration
	if err := db.Pool.QueryRow(ctx, `SELECT EXTRACT(EPOCH FROM expires_at - created_at)::bigint * 1000000000 FROM ui_sessions WHERE id_hash = sha256($1::bytea)`,
		[]byte(secret)).Scan(&lifetime); err != nil {
		t.Fatal(err)
	}
	if lifetime != 2*time.Hour {
		t.Errorf("session lifetime %s, want the configured 2h", lifetime)
	}
	if _, err := svc.DisablePerson(ctx, lab.Principal{Name: "admin", TokenID: "t"}, "rosa"); err != nil {
		t.Fatal(err)
	}
	_, err = db.LookupSession(ctx, secret)
	wantKind(t, err, lab.KindNotFound)
	if err := db.DeleteSession(ctx, secret); err != nil {
		t.Fatal(err)
	}
	var n int
	if err := db.Pool.QueryRow(ctx, `SELECT count(*) FROM audit WHERE actor = 'person:rosa' AND action IN ($1, $2)`,
		store.ActionSessionCreate, store.ActionSessionDelete).Scan(&n); err != nil {
		t.Fatal(err)
	}
	if n != 2 {
		t.Errorf("%d sign-in and sign-out audit rows of rosa, want 2", n)
	}
}
