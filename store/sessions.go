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
	if ttl <= 0 || ttl > lab.MaxSessionTTL {
		return "", lab.Principal{}, lab.Errorf(lab.KindInvalid, "session lifetime must be in (0, %s]", lab.MaxSessionTTL)
	}
	tok, err := db.LookupToken(ctx, tokenSecret)
	if err != nil {
		return "", lab.Principal{}, err
	}
	secret, err := newSecret()
	if err != nil {
		return "", lab.Principal{}, err
	}
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `DELETE FROM ui_sessions WHERE expires_at < now()`); err != nil {
			return classify("prune sessions", err)
		}
		_, err := tx.Exec(ctx, `INSERT INTO ui_sessions (id_hash, token_id, expires_at) VALUES ($1, $2, now() + $3::interval)`,
			hashSecret(secret), tok.TokenID, fmt.Sprintf("%d microseconds", ttl.Microseconds()))
		if err != nil {
			return classify("insert session", err)
		}
		return writeAudit(ctx, tx, tok.Actor(), ActionSessionCreate, entityToken, tok.TokenID,
			map[string]any{"ttl_seconds": int64(ttl.Seconds())})
	})
	if err != nil {
		return "", lab.Principal{}, classify("create session", err)
	}
	return secret, tok, nil
}

// actorOf names a token in the audit trail as the api does.
// LookupSession returns the live session whose secret is secret. An unknown
// or expired session, or one whose token was revoked, is KindNotFound.
func (db *DB) LookupSession(ctx context.Context, secret string) (lab.Session, error) {
	var s lab.Session
	err := db.q(ctx).QueryRow(ctx, `
SELECT t.id, t.name, t.scopes, t.owner, s.expires_at
FROM ui_sessions s JOIN tokens t ON t.id = s.token_id
WHERE s.id_hash = $1 AND s.expires_at > now() AND t.revoked_at IS NULL
  AND NOT EXISTS (SELECT 1 FROM people p WHERE t.owner LIKE 'person:%' AND p.login = substr(t.owner, 8) AND p.disabled_at IS NOT NULL)`, hashSecret(secret)).
		Scan(&s.Token.TokenID, &s.Token.Name, &s.Token.Scopes, &s.Token.Owner, &s.ExpiresAt)
	if errors.Is(err, pgx.ErrNoRows) {
		return lab.Session{}, lab.Errorf(lab.KindNotFound, "no such session")
	}
	if err != nil {
		return lab.Session{}, classify("look up session", err)
	}
	return s, nil
}

// DeleteSession ends the session whose secret is secret (signing out), with
// an audit row. An unknown session is not an error: signing out twice is
// harmless.
func (db *DB) DeleteSession(ctx context.Context, secret string) error {
	err := db.inTx(ctx, func(tx pgx.Tx) error {
		var t lab.Principal
		err := tx.QueryRow(ctx, `
DELETE FROM ui_sessions s USING tokens t
WHERE s.id_hash = $1 AND t.id = s.token_id
RETURNING t.id, t.name`, hashSecret(secret)).Scan(&t.TokenID, &t.Name)
		if errors.Is(err, pgx.ErrNoRows) {
			return nil
		}
		if err != nil {
			return classify("delete session", err)
		}
		return writeAudit(ctx, tx, t.Actor(), ActionSessionDelete, entityToken, t.TokenID, map[string]any{})
	})
	return classify("delete session", err)
}
