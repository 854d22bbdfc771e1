package store

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/base64"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

const (
	// TokenPrefix starts every secret CreateToken issues, so that a leaked
	// token is recognisable (for example by secret scanners).
	TokenPrefix = "ck_"
	// tokenBytes is the secret's entropy: 256 bits from crypto/rand.
	tokenBytes = 32
	// minSecretLen is the shortest secret EnsureToken accepts: 22 base64
	// characters carry 132 bits.
	minSecretLen = 22
)

// hashSecret is the stored form of a secret: its SHA-256.
func hashSecret(secret string) []byte {
	h := sha256.Sum256([]byte(secret))
	return h[:]
}

// newSecret returns a fresh secret: TokenPrefix and 32 random bytes, base64url.
func newSecret() (string, error) {
	b := make([]byte, tokenBytes)
	if _, err := rand.Read(b); err != nil {
		return "", fmt.Errorf("store: token secret: %w", err)
	}
	return TokenPrefix + base64.RawURLEncoding.EncodeToString(b), nil
}

// CreateToken issues a token with the given name and scopes and returns its id
// and its secret. The secret is returned only here; the database keeps its
// SHA-256. The creation is audited under actor. The token belongs to the
// owner lab.DefaultOwner gives (the instrument of its name for runs:write
// alone, else actor).
func (db *DB) CreateToken(ctx context.Context, name string, scopes []string, actor string) (id, secret string, err error) {
	return db.CreateOwnedToken(ctx, name, scopes, lab.DefaultOwner(lab.Principal{}, name, scopes), actor)
}

// CreateOwnedToken is CreateToken for a token that belongs to owner
// ("person:<login>", "instrument:<name>").
func (db *DB) CreateOwnedToken(ctx context.Context, name string, scopes []string, owner, actor string) (id, secret string, err error) {
	scopes, err = lab.CheckToken(name, scopes)
	if err != nil {
		return "", "", err
	}
	return db.IssueToken(ctx, lab.TokenInput{Name: name, Scopes: scopes, Owner: owner}, actor)
}

// IssueToken stores token in (checked by the caller) and returns its id and
// its secret. The secret is returned only here; the database keeps its
// SHA-256. The creation is audited under actor, with the binding.
func (db *DB) IssueToken(ctx context.Context, in lab.TokenInput, actor string) (id, secret string, err error) {
	if in.Owner == "" {
		// No owner chosen: an instrument's token belongs to the instrument
		// of its name, any other to whoever issues it (lab.DefaultOwner's
		// rule for an issuer that is not a person).
		in.Owner = actor
		if len(in.Scopes) == 1 && in.Scopes[0] == lab.ScopeRunsWrite {
			in.Owner = lab.OwnerInstrument + in.Name
		}
	}
	if id, err = newID(); err != nil {
		return "", "", err
	}
	if secret, err = newSecret(); err != nil {
		return "", "", err
	}
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		_, err := tx.Exec(ctx, `INSERT INTO tokens (id, name, scopes, hash, created_by, instruments, allow_dual_role, owner) VALUES ($1, $2, $3, $4, $5, $6, $7, $8)`,
			id, in.Name, in.Scopes, hashSecret(secret), actor, in.Instruments, in.AllowDualRole, in.Owner)
		if err != nil {
			return classify("insert token", err)
		}
		detail := map[string]any{"name": in.Name, "scopes": in.Scopes, "owner": in.Owner}
		if in.Instruments != nil {
			detail["instruments"] = in.Instruments
		}
		if in.AllowDualRole {
			detail["allow_dual_role"] = true
		}
		return writeAudit(ctx, tx, actor, ActionTokenCreate, entityToken, id, detail)
	})
	if err != nil {
		return "", "", classify("create token", err)
	}
	return id, secret, nil
}

// UnboundWriteTokens counts the live tokens holding runs:write without admin
// that are not bound to instruments (issued before binding existed): they
// keep working, and the service warns about them at start.
func (db *DB) UnboundWriteTokens(ctx context.Context) (int, error) {
	var n int
	err := db.q(ctx).QueryRow(ctx, `
SELECT count(*) FROM tokens
WHERE revoked_at IS NULL AND instruments IS NULL
  AND 'runs:write' = ANY (scopes) AND NOT 'admin' = ANY (scopes)`).Scan(&n)
	return n, classify("count unbound tokens", err)
}

// RunInstrument returns the instrument of run id (KindNotFound when there is
// no such run).
func (db *DB) RunInstrument(ctx context.Context, id string) (string, error) {
	id, err := parseID("run", id)
	if err != nil {
		return "", err
	}
	var inst string
	err = db.q(ctx).QueryRow(ctx, `SELECT instrument FROM runs WHERE id = $1`, id).Scan(&inst)
	if errors.Is(err, pgx.ErrNoRows) {
		return "", lab.Errorf(lab.KindNotFound, "run %s not found", id)
	}
	return inst, classify("select instrument of run "+id, err)
}

// CurveInstrument returns the instrument of curve id's run (KindNotFound
// when there is no such curve).
func (db *DB) CurveInstrument(ctx context.Context, id string) (string, error) {
	id, err := parseID("curve", id)
	if err != nil {
		return "", err
	}
	var inst string
	err = db.q(ctx).QueryRow(ctx, `SELECT r.instrument FROM curves c JOIN runs r ON r.id = c.run_id WHERE c.id = $1`, id).Scan(&inst)
	if errors.Is(err, pgx.ErrNoRows) {
		return "", lab.Errorf(lab.KindNotFound, "curve %s not found", id)
	}
	return inst, classify("select instrument of curve "+id, err)
}

// EnsureToken stores secret as a token with the given name and scopes unless a
// token with that secret exists already (revoked or not: a revoked bootstrap
// token stays revoked). It returns the token's id and whether it was created.
// It is meant for the bootstrap admin token given to the service at start, so
// the secret must be at least 22 characters long.
func (db *DB) EnsureToken(ctx context.Context, name, secret string, scopes []string) (id string, created bool, err error) {
	if len(secret) < minSecretLen {
		return "", false, lab.Errorf(lab.KindInvalid, "a token secret must be at least %d characters long", minSecretLen)
	}
	scopes, err = lab.CheckToken(name, scopes)
	if err != nil {
		return "", false, err
	}
	newTokenID, err := newID()
	if err != nil {
		return "", false, err
	}
	hash := hashSecret(secret)
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		created = false
		err := tx.QueryRow(ctx, `
INSERT INTO tokens (id, name, scopes, hash, created_by, owner) VALUES ($1, $2, $3, $4, 'bootstrap', $5)
ON CONFLICT (hash) DO NOTHING
RETURNING id`, newTokenID, name, scopes, hash, lab.DefaultOwner(lab.Principal{Name: "bootstrap"}, name, scopes)).Scan(&id)
		if errors.Is(err, pgx.ErrNoRows) {
			err = tx.QueryRow(ctx, `SELECT id FROM tokens WHERE hash = $1`, hash).Scan(&id)
			return classify("select bootstrap token", err)
		}
		if err != nil {
			return classify("insert bootstrap token", err)
		}
		created = true
		return writeAudit(ctx, tx, "bootstrap", ActionTokenBootstrap, entityToken, id,
			map[string]any{"name": name, "scopes": scopes})
	})
	if err != nil {
		return "", false, classify("ensure token", err)
	}
	return id, created, nil
}

// LookupToken returns the live token whose secret is secret. An unknown or
// revoked secret is a KindNotFound error (the api answers 401 for both).
func (db *DB) LookupToken(ctx context.Context, secret string) (lab.Principal, error) {
	t, _, err := db.lookupTokenStatus(ctx, secret, "")
	return t, err
}

// lookupTokenStatus looks up the token of secret and, when curveID is not
// "", the review status of that curve (nil when it names no curve), through
// the coalescing lookups of token_lookups.go: a fresh read on every call.
func (db *DB) lookupTokenStatus(ctx context.Context, secret, curveID string) (lab.Principal, *string, error) {
	hash := hashSecret(secret)
	a, err := db.lookups().do(ctx, hash, curveID)
	if err != nil {
		return lab.Principal{}, nil, classify("look up token", err)
	}
	err = a.err
	if err == nil && !a.found {
		err = pgx.ErrNoRows
	}
	t, err := liveToken(a.tok, hash, a.stored, a.revokedAt, err)
	if err != nil {
		return lab.Principal{}, nil, err
	}
	return t, a.status, nil
}

// liveToken decides a token lookup: the row must exist, carry the hash and
// not be revoked.
func liveToken(t lab.Principal, hash, stored []byte, revokedAt *time.Time, err error) (lab.Principal, error) {
	if errors.Is(err, pgx.ErrNoRows) {
		return lab.Principal{}, lab.Errorf(lab.KindNotFound, "unknown token")
	}
	if err != nil {
		return lab.Principal{}, classify("look up token", err)
	}
	// The index found the row by hash; comparing the hashes again in
	// constant time keeps the decision itself free of timing differences.
	if subtle.ConstantTimeCompare(stored, hash) != 1 {
		return lab.Principal{}, lab.Errorf(lab.KindNotFound, "unknown token")
	}
	if revokedAt != nil {
		return lab.Principal{}, lab.Errorf(lab.KindNotFound, "token revoked")
	}
	return t, nil
}

// LiveTokensCreatedBy returns the tokens that actor issued and that are not
// revoked, oldest first (their secrets are not stored, so not returned). It
// lets a tool that issues tokens under its own actor name, such as the demo
// loader, find and revoke the ones it issued before.
func (db *DB) LiveTokensCreatedBy(ctx context.Context, actor string) ([]lab.Principal, error) {
	rows, err := db.q(ctx).Query(ctx, `
SELECT id, name, scopes FROM tokens
WHERE created_by = $1 AND revoked_at IS NULL
ORDER BY created_at, id`, actor)
	if err != nil {
		return nil, classify("list tokens", err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (lab.Principal, error) {
		var t lab.Principal
		err := r.Scan(&t.TokenID, &t.Name, &t.Scopes)
		return t, err
	})
	if err != nil {
		return nil, classify("list tokens", err)
	}
	return out, nil
}

// RevokeToken revokes token id; the next LookupToken refuses it. Revoking a
// revoked token changes nothing and succeeds; an unknown id is KindNotFound.
func (db *DB) RevokeToken(ctx context.Context, id, actor string) error {
	id, err := parseID("token", id)
	if err != nil {
		return err
	}
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		var name string
		var revokedAt *time.Time
		err := tx.QueryRow(ctx, `SELECT name, revoked_at FROM tokens WHERE id = $1 FOR UPDATE`, id).Scan(&name, &revokedAt)
		if errors.Is(err, pgx.ErrNoRows) {
			return lab.Errorf(lab.KindNotFound, "token %s not found", id)
		}
		if err != nil {
			return classify("select token", err)
		}
		if revokedAt != nil {
			return nil
		}
		if _, err := tx.Exec(ctx, `UPDATE tokens SET revoked_at = now(), revoked_by = $2 WHERE id = $1`, id, actor); err != nil {
			return classify("revoke token", err)
		}
		return writeAudit(ctx, tx, actor, ActionTokenRevoke, entityToken, id, map[string]any{"name": name})
	})
	return classify("revoke token "+id, err)
}
