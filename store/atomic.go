package store

import (
	"context"
	"errors"
	"fmt"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"curvekeeper/lab"
)

// A write and its answer are one unit: Atomically opens a transaction and
// hands fn a context that carries it; every store call made with that
// context joins it (inTx as a savepoint, reads through db.q), so what the
// api encodes as the answer is encoded before the commit and a failure to
// answer leaves nothing behind (lab.Service.Atomically).

type txKey struct{}

// txOf is the transaction ctx carries, or nil.
func txOf(ctx context.Context) pgx.Tx {
	tx, _ := ctx.Value(txKey{}).(pgx.Tx)
	return tx
}

// withoutTx is ctx without the unit's transaction: what is written with it
// commits on its own (a counted sign-in failure).
func withoutTx(ctx context.Context) context.Context {
	return context.WithValue(ctx, txKey{}, pgx.Tx(nil))
}

// Atomically runs fn in one transaction and commits it when fn returns nil.
// Store calls made with the context fn receives join the transaction. A
// serialization failure or deadlock runs fn again (inTx), so fn must be safe
// to run again. Inside another Atomically it joins the outer transaction.
func (db *DB) Atomically(ctx context.Context, fn func(ctx context.Context) error) error {
	return db.inTx(ctx, func(tx pgx.Tx) error { return fn(context.WithValue(ctx, txKey{}, tx)) })
}

// querier is what the reads need of a pool or a transaction.
type querier interface {
	Query(ctx context.Context, sql string, args ...any) (pgx.Rows, error)
	QueryRow(ctx context.Context, sql string, args ...any) pgx.Row
	Exec(ctx context.Context, sql string, args ...any) (pgconn.CommandTag, error)
}

// q is the transaction ctx carries (a read made inside Atomically sees the
// unit's own writes), else the pool.
func (db *DB) q(ctx context.Context) querier {
	if tx := txOf(ctx); tx != nil {
		return tx
	}
	return db.Pool
}

// The stored answers of writes other than runs (migration 000017): a key
// is claimed first, in the write's transaction, with a placeholder answer
// that the same transaction replaces; a concurrent request with the same
// key waits on the claim and then replays the answer. Runs keep their own
// statements (idempotency.go); both share the table and its primary key
// (token, key), so a key names one request whatever its route.
const (
	sqlClaimAnswer = `
INSERT INTO idempotency_keys (token_id, key, request_hash, operation, response_status)
VALUES ($1, $2, $3, $4, 0)
ON CONFLICT (token_id, key) DO NOTHING
RETURNING true`
	sqlSelectAnswer = `SELECT request_hash, operation, response_status, response_location, response_raw, response_body
FROM idempotency_keys WHERE token_id = $1 AND key = $2`
	sqlStoreAnswer = `UPDATE idempotency_keys SET response_status = $3, response_location = $4, response_raw = $5
WHERE token_id = $1 AND key = $2 AND response_status = 0`
)

// ClaimKey claims c's key inside the transaction of Atomically. It returns
// nil when the key is new (the caller writes, then StoreAnswer), the stored
// answer when the key was used before with the same operation and request
// hash, and KindInvalid when it was used with another.
func (db *DB) ClaimKey(ctx context.Context, c lab.KeyClaim) (*lab.StoredAnswer, error) {
	tx := txOf(ctx)
	if tx == nil {
		return nil, errors.New("store: ClaimKey outside Atomically")
	}
	tokenID, err := parseID("token", c.TokenID)
	if err != nil {
		return nil, err
	}
	var claimed bool
	err = tx.QueryRow(ctx, sqlClaimAnswer, tokenID, c.Key, c.RequestHash, c.Operation).Scan(&claimed)
	if err == nil {
		return nil, nil
	}
	if !errors.Is(err, pgx.ErrNoRows) {
		return nil, classify("claim idempotency key", err)
	}
	var (
		hash      []byte
		op        string
		status    int
		location  *string
		raw, body []byte
	)
	if err := tx.QueryRow(ctx, sqlSelectAnswer, tokenID, c.Key).Scan(&hash, &op, &status, &location, &raw, &body); err != nil {
		return nil, classify("select idempotency key", err)
	}
	if op != c.Operation || string(hash) != string(c.RequestHash) || status == 0 {
		return nil, errKeyReused()
	}
	a := &lab.StoredAnswer{Status: status, Body: raw}
	if location != nil {
		a.Location = *location
	}
	return a, nil
}

// StoreAnswer keeps a's answer under the key ClaimKey claimed, in the same
// transaction.
func (db *DB) StoreAnswer(ctx context.Context, c lab.KeyClaim, a lab.StoredAnswer) error {
	tx := txOf(ctx)
	if tx == nil {
		return errors.New("store: StoreAnswer outside Atomically")
	}
	tokenID, err := parseID("token", c.TokenID)
	if err != nil {
		return err
	}
	var location *string
	if a.Location != "" {
		location = &a.Location
	}
	tag, err := tx.Exec(ctx, sqlStoreAnswer, tokenID, c.Key, a.Status, location, a.Body)
	if err != nil {
		return classify("store idempotent answer", err)
	}
	if tag.RowsAffected() != 1 {
		return fmt.Errorf("store: idempotency key %q was not claimed by this transaction", c.Key)
	}
	return nil
}
