package store

import (
	"context"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"
)

// CurveStatus returns the review status of curve id (one indexed read, for
// callers that hold the immutable rest of the curve in a cache).
func (db *DB) CurveStatus(ctx context.Context, id string) (string, error) {
	id, err := parseID("curve", id)
	if err != nil {
		return "", err
	}
	var status string
	err = db.Pool.QueryRow(ctx, `SELECT status FROM curves WHERE id = $1`, id).Scan(&status)
	if errors.Is(err, pgx.ErrNoRows) {
		return "", Errorf(KindNotFound, "no curve %s", id)
	}
	if err != nil {
		return "", classify("select curve status", err)
	}
	return status, nil
}

// LookupTokenAndCurveStatus is LookupToken and CurveStatus in one statement,
// one round trip, for the prediction route, whose every request needs both.
// The token decision is LookupToken's; the status is "" when curve id does
// not exist (the caller then reports not found as CurveStatus would).
func (db *DB) LookupTokenAndCurveStatus(ctx context.Context, secret, curveID string) (Token, string, error) {
	id, err := parseID("curve", curveID)
	if err != nil {
		t, err := db.LookupToken(ctx, secret)
		return t, "", err
	}
	hash := hashSecret(secret)
	var (
		t         Token
		stored    []byte
		revokedAt *time.Time
		status    *string
	)
	err = db.Pool.QueryRow(ctx, `
SELECT t.id, t.name, t.scopes, t.hash, t.revoked_at, (SELECT c.status FROM curves c WHERE c.id = $2)
FROM tokens t WHERE t.hash = $1`, hash, id).Scan(&t.ID, &t.Name, &t.Scopes, &stored, &revokedAt, &status)
	t, err = liveToken(t, hash, stored, revokedAt, err)
	if err != nil || status == nil {
		return t, "", err
	}
	return t, *status, nil
}
