package store

import (
	"fmt"

	"github.com/google/uuid"

	"curvekeeper/lab"
)

// newID returns a new identifier for a run, curve or token: a UUIDv7, whose
// leading timestamp keeps the primary-key indexes appending at their right
// edge under sustained ingest.
func newID() (string, error) {
	id, err := uuid.NewV7()
	if err != nil {
		return "", fmt.Errorf("store: new id: %w", err)
	}
	return id.String(), nil
}

// parseID checks that s is a UUID. A malformed id names nothing, so it is
// reported as KindNotFound for what (e.g. "curve") rather than reaching the
// database as a cast error.
func parseID(what, s string) (string, error) {
	id, err := uuid.Parse(s)
	if err != nil {
		return "", lab.Errorf(lab.KindNotFound, "%s %q not found", what, s)
	}
	return id.String(), nil
}
