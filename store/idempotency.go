package store

import (
	"context"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// Idempotency keys are scoped to the token that used them (primary key
// token_id, key): keys are chosen by clients, and two clients choosing the
// same key must neither collide nor read each other's response.
const (
	// sqlClaimKey claims a key for a new run. ON CONFLICT waits for a
	// concurrent transaction holding the same key to finish; if it
	// committed, no row is returned and the caller replays its response.
	sqlClaimKey = `
INSERT INTO idempotency_keys (token_id, key, request_hash, run_id, response_status, response_body)
VALUES ($1, $2, $3, $4, 201, $5)
ON CONFLICT (token_id, key) DO NOTHING
RETURNING true`
	// A key another write claimed (migration 000017) has no run's hash:
	// the run is refused as a reuse.
	sqlSelectKey = `SELECT CASE WHEN operation = 'createRun' THEN request_hash ELSE '' END, response_body
FROM idempotency_keys WHERE token_id = $1 AND key = $2`
)

// errKeyReused is the refusal of a key used before with another body.
func errKeyReused() error {
	return &lab.Error{Kind: lab.KindInvalid, In: lab.InHeader, Field: "/Idempotency-Key", Message: "Idempotency-Key reused with a different body"}
}

// rowQuerier is what storedRun needs of a pool or a transaction.
type rowQuerier interface {
	QueryRow(ctx context.Context, sql string, args ...any) pgx.Row
}

// storedRun returns the response stored under (tokenID, key) with Replayed
// set: KindNotFound when the key is unused, KindInvalid when it was used with
// another request hash.
func storedRun(ctx context.Context, q rowQuerier, tokenID, key string, requestHash []byte) (*lab.RunCreated, error) {
	return decodeStoredRun(q.QueryRow(ctx, sqlSelectKey, tokenID, key), requestHash)
}

// LookupIdempotency returns the run stored under (tokenID, key), so the api
// can answer a retry without fitting again: KindNotFound when the key is
// unused, KindInvalid when it was used with a different request hash.
// CreateRun makes the same decision race-free; this is only a shortcut.
func (db *DB) LookupIdempotency(ctx context.Context, tokenID, key string, requestHash []byte) (*lab.RunCreated, error) {
	tokenID, err := parseID("token", tokenID)
	if err != nil {
		return nil, err
	}
	return storedRun(ctx, db.Pool, tokenID, key, requestHash)
}
