package store

import (
	"context"
	"errors"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// CurveStatus returns the review status of curve id (one indexed read, for
// callers that hold the immutable rest of the curve in a cache).
func (db *DB) CurveStatus(ctx context.Context, id string) (string, error) {
	id, err := parseID("curve", id)
	if err != nil {
		return "", err
	}
	var status string
	err = db.q(ctx).QueryRow(ctx, `SELECT status FROM curves WHERE id = $1`, id).Scan(&status)
	if errors.Is(err, pgx.ErrNoRows) {
		return "", lab.Errorf(lab.KindNotFound, "no curve %s", id)
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
func (db *DB) LookupTokenAndCurveStatus(ctx context.Context, secret, curveID string) (lab.Principal, string, error) {
	id, err := parseID("curve", curveID)
	if err != nil {
		t, err := db.LookupToken(ctx, secret)
		return t, "", err
	}
	t, status, err := db.lookupTokenStatus(ctx, secret, id)
	if err != nil || status == nil {
		return t, "", err
	}
	return t, *status, nil
}
