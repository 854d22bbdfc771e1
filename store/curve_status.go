package store

import (
	"context"
	"errors"

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
