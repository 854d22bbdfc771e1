package store

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"strings"
	"syscall"

	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/puddle/v2"

	"curvekeeper/lab"
)

// SQLSTATE codes the store recognises.
const (
	// codeImmutable is raised by the schema's triggers when a statement would
	// change or remove evidence (migrations/000001_core.up.sql).
	codeImmutable           = "CK001"
	codeUniqueViolation     = "23505"
	codeForeignKeyViolation = "23503"
)

// classify wraps err with the operation that failed. A database that cannot be
// reached (refused, broken or closed connection, shutdown, timeout, too
// many connections) becomes a KindUnavailable *Error so that the api answers 503;
// an *Error passes through unchanged; anything else stays KindInternal.
func classify(op string, err error) error {
	if err == nil {
		return nil
	}
	var se *lab.Error
	if errors.As(err, &se) {
		return err
	}
	wrapped := fmt.Errorf("store: %s: %w", op, err)
	if unavailable(err) {
		return &lab.Error{Kind: lab.KindUnavailable, Message: "the database is unavailable", Err: wrapped}
	}
	return wrapped
}

// unavailable reports whether err says the database could not be reached or
// could not serve the request now, as opposed to refusing it.
func unavailable(err error) bool {
	if errors.Is(err, context.DeadlineExceeded) || errors.Is(err, puddle.ErrClosedPool) {
		return true // a closed pool: the service is shutting down
	}
	// A pooled connection that broke earlier in its transaction (the
	// server crashed or was stopped) answers Begin, Exec and Commit with
	// this; it carries no SQLSTATE and is not a net.Error.
	if errors.Is(err, pgconn.ErrConnClosed) {
		return true
	}
	var pgErr *pgconn.PgError
	if errors.As(err, &pgErr) {
		switch {
		case strings.HasPrefix(pgErr.Code, "08"): // connection exception
			return true
		case strings.HasPrefix(pgErr.Code, "53"): // insufficient resources
			return true
		case pgErr.Code == "57P01", pgErr.Code == "57P02", pgErr.Code == "57P03": // shutdown, cannot connect now
			return true
		case pgErr.Code == "57014": // query_canceled (statement timeout)
			return true
		}
		return false
	}
	var connErr *pgconn.ConnectError
	if errors.As(err, &connErr) {
		return true
	}
	var netErr net.Error
	if errors.As(err, &netErr) {
		return true
	}
	if errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF) ||
		errors.Is(err, syscall.ECONNREFUSED) || errors.Is(err, syscall.ECONNRESET) || errors.Is(err, syscall.EPIPE) {
		return true
	}
	return pgconn.Timeout(err)
}

// pgCode returns the SQLSTATE of err, or "" when it carries none.
func pgCode(err error) string {
	var pgErr *pgconn.PgError
	if errors.As(err, &pgErr) {
		return pgErr.Code
	}
	return ""
}

// pgConstraint returns the constraint err names, or "" when it names none.
func pgConstraint(err error) string {
	var pgErr *pgconn.PgError
	if errors.As(err, &pgErr) {
		return pgErr.ConstraintName
	}
	return ""
}
