package api

import (
	"github.com/google/uuid"

	"curvekeeper/calib"
)

// uuidOf parses an id the store produced; the store only hands out UUIDs.
func uuidOf(s string) uuid.UUID {
	id, err := uuid.Parse(s)
	if err != nil {
		return uuid.Nil
	}
	return id
}

// optString is nil for "" and a pointer to s otherwise.
func optString(s string) *string {
	if s == "" {
		return nil
	}
	return &s
}

func deref(s *string) string {
	if s == nil {
		return ""
	}
	return *s
}

// num returns v as a JSON number, or null when it is not finite.
func num(v float64) *float64 {
	if !calib.Finite(v) {
		return nil
	}
	return &v
}
