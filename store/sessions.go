package store

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// Audit actions of the QA pages' sessions.
const (
	ActionSessionCreate = "session.create"
	ActionSessionDelete = "session.delete"
)

// CreateSession exchanges an API token's secret for a new session of ttl
// (at most MaxSessionTTL) and returns the session's secret, shown only here
// (the database keeps its SHA-256), and the token. An unknown or revoked
// token is KindNotFound. Expired sessions are pruned in the same
// transaction, and the sign-in is audited under the token.
func (db *DB) CreateSession(ctx context.Context, tokenSecret string, ttl time.Duration) (string, lab.Principal, error) {
	if err := checkSessionTTL(ttl); err != nil {
		return "", lab.Principal{}, err
	}
	tok, err := db.LookupToken(ctx, tokenSecret)
	if err != nil {
		return "", lab.Principal{}, err
	}
	secret, err := db.openSession(ctx, ttl, sessionOwner{column: "token_id", id: tok.TokenID,
		actor: tok.Actor(), entity: entityToken, entityID: tok.TokenID})
	if err != nil {
		return "", lab.Principal{}, err
	}
	return secret, tok, nil
}

// CreatePersonSession opens a session of ttl (at most MaxSessionTTL) for
// person, whom the caller authenticated with login and password, and
// returns its secret, shown only here. The sign-in is audited under the
// person.
func (db *DB) CreatePersonSession(ctx context.Context, person *lab.Person, ttl time.Duration) (string, error) {
	if err := checkSessionTTL(ttl); err != nil {
		return "", err
	}
	return db.openSession(ctx, ttl, sessionOwner{column: "person_id", id: person.ID,
		actor: person.Owner(), entity: entityPerson, entityID: person.Login, by: "login and password"})
}

func checkSessionTTL(ttl time.Duration) error {
	if ttl <= 0 || ttl > lab.MaxSessionTTL {
		return lab.Errorf(lab.KindInvalid, "session lifetime must be in (0, %s]", lab.MaxSessionTTL)
	}
	return nil
}

// sessionOwner is whom a new session belongs to: a token or a person (the
// ui_sessions column and its value) and how the sign-in is audited.
type sessionOwner struct {
	column, id              string // "token_id" or "person_id"
	actor, entity, entityID string
	by                      string // how the person signed in; "" for a token
}

// openSession prunes expired sessions, stores a new one of ttl for o and
// audits the sign-in, in one transaction, and returns the session's secret.
func (db *DB) openSession(ctx context.Context, ttl time.Duration, o sessionOwner) (string, error) {
	secret, err := newSecret()
	if err != nil {
		return "", err
	}
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `DELETE FROM ui_sessions WHERE expires_at < now()`); err != nil {
			return classify("prune sessions", err)
		}
		// o.column is one of two constants, never input.
		_, err := tx.Exec(ctx, `INSERT INTO ui_sessions (id_hash, `+o.column+`, expires_at) VALUES ($1, $2, now() + $3::interval)`,
			hashSecret(secret), o.id, fmt.Sprintf("%d microseconds", ttl.Microseconds()))
		if err != nil {
			return classify("insert session", err)
		}
		detail := map[string]any{"ttl_seconds": int64(ttl.Seconds())}
		if o.by != "" {
			detail["by"] = o.by
		}
		return writeAudit(ctx, tx, o.actor, ActionSessionCreate, o.entity, o.entityID, detail)
	})
	if err != nil {
		return "", classify("create session", err)
	}
	return secret, nil
}

// LookupSession returns the live session whose secret is secret. An unknown
// or expired session, one whose token was revoked, or one of a disabled
// person (by token ownership or by sign-in) is KindNotFound. A person's
// session carries the scopes of the person's roles (lab.ScopesOfRoles).
func (db *DB) LookupSession(ctx context.Context, secret string) (lab.Session, error) {
	var (
		s           lab.Session
		tokenID     *string
		name, owner string
		scopes      []string
		roles       []string
	)
	err := db.q(ctx).QueryRow(ctx, `
SELECT t.id::text, COALESCE(t.name, p.login), COALESCE(t.scopes, '{}'), COALESCE(t.owner, 'person:' || p.login),
       COALESCE(p.roles, '{}'), COALESCE(p.full_name, ''), s.expires_at
FROM ui_sessions s
LEFT JOIN tokens t ON t.id = s.token_id
LEFT JOIN people p ON p.id = s.person_id
WHERE s.id_hash = $1 AND s.expires_at > now()
  AND (t.id IS NULL OR t.revoked_at IS NULL)
  AND (p.id IS NULL OR p.disabled_at IS NULL)
  AND NOT EXISTS (SELECT 1 FROM people o WHERE t.owner LIKE 'person:%' AND o.login = substr(t.owner, 8) AND o.disabled_at IS NOT NULL)`, hashSecret(secret)).
		Scan(&tokenID, &name, &scopes, &owner, &roles, &s.PrintedName, &s.ExpiresAt)
	if errors.Is(err, pgx.ErrNoRows) {
		return lab.Session{}, lab.Errorf(lab.KindNotFound, "no such session")
	}
	if err != nil {
		return lab.Session{}, classify("look up session", err)
	}
	s.Token = lab.Principal{TokenID: deref(tokenID), Name: name, Scopes: scopes, Owner: owner}
	if tokenID == nil {
		s.Token.Scopes = lab.ScopesOfRoles(roles)
	}
	return s, nil
}

// DeleteSession ends the session whose secret is secret (signing out), with
// an audit row. An unknown session is not an error: signing out twice is
// harmless.
func (db *DB) DeleteSession(ctx context.Context, secret string) error {
	err := db.inTx(ctx, func(tx pgx.Tx) error {
		var tokenID, tokenName, login *string
		err := tx.QueryRow(ctx, `
WITH gone AS (DELETE FROM ui_sessions WHERE id_hash = $1 RETURNING token_id, person_id)
SELECT t.id::text, t.name, p.login FROM gone g
LEFT JOIN tokens t ON t.id = g.token_id LEFT JOIN people p ON p.id = g.person_id`, hashSecret(secret)).Scan(&tokenID, &tokenName, &login)
		if errors.Is(err, pgx.ErrNoRows) {
			return nil
		}
		if err != nil {
			return classify("delete session", err)
		}
		if login != nil {
			return writeAudit(ctx, tx, lab.OwnerPerson+*login, ActionSessionDelete, entityPerson, *login, map[string]any{})
		}
		t := lab.Principal{TokenID: deref(tokenID), Name: deref(tokenName)}
		return writeAudit(ctx, tx, t.Actor(), ActionSessionDelete, entityToken, t.TokenID, map[string]any{})
	})
	return classify("delete session", err)
}
