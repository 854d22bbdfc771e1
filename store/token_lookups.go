package store

import (
	"context"
	"sync"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// Token lookups run on every authenticated request, so under load they are
// most of the statements the database executes. tokenLookups coalesces the
// lookups that callers ask for while a statement is already running into
// the next statement (the group-commit pattern, applied to reads): one
// round trip then answers many requests.
//
// The rule that keeps revocation exact: a caller is answered only by a
// statement that began after the caller asked. A statement sees every
// transaction committed before it began (READ COMMITTED), so a revocation
// committed before a request arrived is seen by that request's lookup, on
// every replica, exactly as with one statement per request. A caller never
// joins a statement already in flight; it waits for the next one.
type tokenLookups struct {
	db      *DB
	max     int           // statements in flight at once
	timeout time.Duration // of one statement, which serves many callers

	mu      sync.Mutex
	pending []*tokenLookup
	running int
}

// tokenLookup is one caller's question (a token hash, and optionally a curve
// whose review status it needs) and, once done is closed, its answer.
type tokenLookup struct {
	hash  []byte
	curve string // "" when the caller needs no curve status
	done  chan struct{}

	found     bool
	tok       lab.Principal
	stored    []byte
	revokedAt *time.Time
	status    *string // nil when curve is "" or names no curve
	err       error
}

// lookupStatements is how many coalesced statements may be in flight at
// once. A caller that finds fewer in flight starts its own at once, so an
// idle service answers in one round trip as before; under load the callers
// that arrive during those statements share the next ones.
const lookupStatements = 2

// lookupTimeout bounds one coalesced statement. Each caller also stops
// waiting when its own context ends.
const lookupTimeout = 10 * time.Second

func (db *DB) lookups() *tokenLookups {
	db.lookupsOnce.Do(func() {
		db.tokenLookups = &tokenLookups{db: db, max: lookupStatements, timeout: lookupTimeout}
	})
	return db.tokenLookups
}

// do asks for one lookup and waits for its answer.
func (l *tokenLookups) do(ctx context.Context, hash []byte, curve string) (*tokenLookup, error) {
	q := &tokenLookup{hash: hash, curve: curve, done: make(chan struct{})}
	l.mu.Lock()
	l.pending = append(l.pending, q)
	var batch []*tokenLookup
	if l.running < l.max {
		l.running++
		batch, l.pending = l.pending, nil
	}
	l.mu.Unlock()
	if batch != nil {
		go l.run(batch)
	}
	select {
	case <-q.done:
		return q, nil
	case <-ctx.Done():
		return nil, ctx.Err()
	}
}

// run answers batch, then every batch that gathered meanwhile, until none
// is pending.
func (l *tokenLookups) run(batch []*tokenLookup) {
	for {
		l.answer(batch)
		l.mu.Lock()
		if len(l.pending) == 0 {
			l.running--
			l.mu.Unlock()
			return
		}
		batch, l.pending = l.pending, nil
		l.mu.Unlock()
	}
}

// sqlTokenLookups answers a batch of (hash, curve) questions in one
// statement; row i answers question i (1-based). A question whose hash
// names no token has no row. The curve ids go as text[] (pgx has no binary
// encoding of []*string as uuid[] and would first fail trying one).
//
// The statements are written so that PostgreSQL keeps one generic plan for
// each instead of planning every execution. It plans a prepared statement
// afresh (a custom plan) for as long as that plan is estimated cheaper
// than the generic one. Two things made it so on every call, measured with
// pg_stat_statements under the ingest load (as many plans as calls, about
// 0.1 ms of planning each):
//   - unnest of an array parameter: a custom plan counts the array's
//     elements, a generic one uses a fixed estimate (100 rows, from memory of
//     unnest's declared row count), so the custom plan always looked cheaper
//     for the few questions of a batch. The arrays go through a scalar
//     subquery, which neither plan can see into;
//   - a NULL curve id: the custom plan folds the curve subquery away. A
//     question without a curve has its own statement without it.
//
// A token of a disabled person counts as revoked from the disabling on.
const sqlTokenLookups = `
SELECT q.i, t.id, t.name, t.scopes, t.instruments, t.owner, t.hash, COALESCE(t.revoked_at, (SELECT p.disabled_at FROM people p WHERE t.owner LIKE 'person:%' AND p.login = substr(t.owner, 8))),
       (SELECT c.status FROM curves c WHERE c.id = q.curve::uuid)
FROM unnest((SELECT $1::bytea[]), (SELECT $2::text[])) WITH ORDINALITY AS q(hash, curve, i)
JOIN tokens t ON t.hash = q.hash`

// sqlTokenLookupOne is sqlTokenLookups for a single question without a
// curve, sqlTokenLookupOneCurve for one with a curve.
const (
	sqlTokenLookupOne = `
SELECT 1::bigint, t.id, t.name, t.scopes, t.instruments, t.owner, t.hash, COALESCE(t.revoked_at, (SELECT p.disabled_at FROM people p WHERE t.owner LIKE 'person:%' AND p.login = substr(t.owner, 8))), NULL::text
FROM tokens t WHERE t.hash = $1`
	sqlTokenLookupOneCurve = `
SELECT 1::bigint, t.id, t.name, t.scopes, t.instruments, t.owner, t.hash, COALESCE(t.revoked_at, (SELECT p.disabled_at FROM people p WHERE t.owner LIKE 'person:%' AND p.login = substr(t.owner, 8))),
       (SELECT c.status FROM curves c WHERE c.id = $2::uuid)
FROM tokens t WHERE t.hash = $1`
)

// answer runs one statement for batch, asking each distinct question once.
func (l *tokenLookups) answer(batch []*tokenLookup) {
	type key struct{ hash, curve string }
	index := make(map[key]int, len(batch)) // question → its 0-based position
	var (
		hashes [][]byte
		curves []*string
		first  []*tokenLookup // the first caller of each question
	)
	for _, q := range batch {
		k := key{string(q.hash), q.curve}
		if _, ok := index[k]; ok {
			continue
		}
		index[k] = len(hashes)
		hashes = append(hashes, q.hash)
		var c *string
		if q.curve != "" {
			c = &q.curve
		}
		curves = append(curves, c)
		first = append(first, q)
	}

	ctx, cancel := context.WithTimeout(context.Background(), l.timeout)
	defer cancel()
	err := func() error {
		var (
			rows pgx.Rows
			err  error
		)
		switch {
		// The usual batch (one client's token, one curve or none): scalar
		// parameters encode and plan cheaper than arrays.
		case len(hashes) == 1 && curves[0] == nil:
			rows, err = l.db.Pool.Query(ctx, sqlTokenLookupOne, hashes[0])
		case len(hashes) == 1:
			rows, err = l.db.Pool.Query(ctx, sqlTokenLookupOneCurve, hashes[0], *curves[0])
		default:
			rows, err = l.db.Pool.Query(ctx, sqlTokenLookups, hashes, curves)
		}
		if err != nil {
			return err
		}
		defer rows.Close()
		for rows.Next() {
			var (
				i int64
				a tokenLookup
			)
			if err := rows.Scan(&i, &a.tok.TokenID, &a.tok.Name, &a.tok.Scopes, &a.tok.Instruments, &a.tok.Owner, &a.stored, &a.revokedAt, &a.status); err != nil {
				return err
			}
			if i < 1 || int(i) > len(first) {
				continue
			}
			q := first[i-1]
			q.found, q.tok, q.stored, q.revokedAt, q.status = true, a.tok, a.stored, a.revokedAt, a.status
		}
		return rows.Err()
	}()

	for _, q := range batch {
		src := first[index[key{string(q.hash), q.curve}]]
		if err != nil {
			q.err = err
		} else if q != src {
			q.found, q.tok, q.stored, q.revokedAt, q.status = src.found, src.tok, src.stored, src.revokedAt, src.status
			q.tok.Scopes = append([]string(nil), src.tok.Scopes...)
			if src.tok.Instruments != nil {
				q.tok.Instruments = append([]string{}, src.tok.Instruments...)
			}
		}
		close(q.done)
	}
}
