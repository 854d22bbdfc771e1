package api

import (
	"math"
	"strconv"
	"strings"

	"github.com/google/uuid"
)

// uuidOf parses an id the store produced; the store only hands out UUIDs.
func uuidOf(s string) uuid.UUID {
	id, err := uuid.Parse(s)
	if err != nil {
		return uuid.Nil
	}
	return id
}

// pointer builds a JSON pointer from reference tokens.
func pointer(tokens ...any) string {
	var b strings.Builder
	for _, t := range tokens {
		b.WriteByte('/')
		switch v := t.(type) {
		case int:
			b.WriteString(strconv.Itoa(v))
		case string:
			b.WriteString(pointerEscaper.Replace(v))
		}
	}
	return b.String()
}

func deref(s *string) string {
	if s == nil {
		return ""
	}
	return *s
}

// num returns v as a JSON number, or null when it is not finite.
func num(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}
