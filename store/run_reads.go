package store

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"slices"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// sqlSelectLatestMethod reads a method's newest revision.
const sqlSelectLatestMethod = sqlSelectMethod + ` WHERE name = $1 ORDER BY revision DESC LIMIT 1`

// ReadForRun makes the reads of LookupIdempotency, GetMethod and
// RecentApprovedSlopes (one per analyte) in one pgx batch, one round trip,
// with their decisions and errors in that order: a key used with another
// body is LookupIdempotency's KindInvalid error, a method that does not
// exist is GetMethod's KindNotFound error. The method read is fresh, so a
// run still uses the method's latest revision at the time it is stored.
func (db *DB) ReadForRun(ctx context.Context, q lab.RunReadsQuery) (*lab.RunReads, error) {
	if q.Limit < 1 || q.Limit > lab.MaxTrendPoints {
		return nil, lab.Errorf(lab.KindInvalid, "limit must be in [1, %d]", lab.MaxTrendPoints)
	}
	b := &pgx.Batch{}
	if q.Key != "" {
		tokenID, err := parseID("token", q.TokenID)
		if err != nil {
			return nil, err
		}
		b.Queue(sqlSelectKey, tokenID, q.Key)
	}
	b.Queue(sqlSelectLatestMethod, q.Method)
	analytes := slices.Clone(q.Analytes)
	slices.Sort(analytes)
	analytes = slices.Compact(analytes)
	for _, a := range analytes {
		b.Queue(sqlRecentApprovedSlopes, q.Instrument, a, q.Before, q.Limit)
	}
	br := db.Pool.SendBatch(ctx, b)
	out, err := db.readRunReads(br, q, analytes)
	if cerr := br.Close(); err == nil && cerr != nil {
		err = classify("read for run", cerr)
	}
	if err != nil {
		return nil, err
	}
	return out, nil
}

// readRunReads reads the results of ReadForRun's batch in the order queued.
func (db *DB) readRunReads(br pgx.BatchResults, q lab.RunReadsQuery, analytes []string) (*lab.RunReads, error) {
	out := &lab.RunReads{}
	if q.Key != "" {
		replay, err := decodeStoredRun(br.QueryRow(), q.RequestHash)
		switch {
		case err == nil:
			out.Replay = replay
			return out, nil
		case lab.KindOf(err) != lab.KindNotFound:
			return nil, err
		}
	}
	m, err := scanMethodVia(br.QueryRow(), &db.methodDecodes)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "method %q not found", q.Method)
	}
	if err != nil {
		return nil, classify("select method "+q.Method, err)
	}
	out.Method = m
	out.Slopes = make(map[string][]float64, len(analytes))
	for _, a := range analytes {
		rows, err := br.Query()
		if err != nil {
			return nil, classify("recent approved slopes", err)
		}
		vals, err := pgx.CollectRows(rows, pgx.RowTo[float64])
		if err != nil {
			return nil, classify("scan recent approved slopes", err)
		}
		slices.Reverse(vals)
		out.Slopes[a] = vals
	}
	return out, nil
}

// decodeStoredRun is storedRun's decision on a row of sqlSelectKey.
func decodeStoredRun(row pgx.Row, requestHash []byte) (*lab.RunCreated, error) {
	var hash, body []byte
	err := row.Scan(&hash, &body)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "idempotency key not used")
	}
	if err != nil {
		return nil, classify("select idempotency key", err)
	}
	if !bytes.Equal(hash, requestHash) {
		return nil, errKeyReused()
	}
	var out lab.RunCreated
	if err := json.Unmarshal(body, &out); err != nil {
		return nil, fmt.Errorf("store: decode stored response of idempotency key: %w", err)
	}
	out.Replayed = true
	return &out, nil
}
