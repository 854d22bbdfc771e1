package oapi

import (
	"fmt"
	"time"
)

// TimestampLayout is how every response writes a time: RFC 3339 in UTC with
// exactly six fractional digits. Six, because PostgreSQL's timestamptz holds
// microseconds: every stored time is written in full and a time read back
// from a response (say, as a `from` filter or to compare) is the stored one
// exactly; fewer digits would lose stored precision, more would promise
// precision that is not there.
const TimestampLayout = "2006-01-02T15:04:05.000000Z07:00"

// Timestamp is the type of every `format: date-time` of the spec. It reads
// any RFC 3339 time and writes TimestampLayout; it embeds time.Time, so its
// methods (Equal, Before, Sub, ...) are time.Time's.
type Timestamp struct{ time.Time }

// NewTimestamp returns t as a Timestamp.
func NewTimestamp(t time.Time) Timestamp { return Timestamp{t} }

// TimestampPtr returns nil for nil and t as a *Timestamp otherwise.
func TimestampPtr(t *time.Time) *Timestamp {
	if t == nil {
		return nil
	}
	return &Timestamp{*t}
}

// String is the time as a response writes it.
func (t Timestamp) String() string {
	return t.UTC().Round(time.Microsecond).Format(TimestampLayout)
}

// MarshalJSON writes the time in UTC with six fractional digits (rounded to
// the microsecond as PostgreSQL rounds what it stores).
func (t Timestamp) MarshalJSON() ([]byte, error) {
	if y := t.UTC().Year(); y < 0 || y > 9999 {
		return nil, fmt.Errorf("oapi: timestamp year %d outside 0000-9999", y)
	}
	b := make([]byte, 0, len(TimestampLayout)+2)
	b = append(b, '"')
	b = t.UTC().Round(time.Microsecond).AppendFormat(b, TimestampLayout)
	return append(b, '"'), nil
}

// MarshalText writes what MarshalJSON writes, unquoted.
func (t Timestamp) MarshalText() ([]byte, error) { return []byte(t.String()), nil }

// UnmarshalJSON reads an RFC 3339 time, as time.Time does.
func (t *Timestamp) UnmarshalJSON(b []byte) error { return t.Time.UnmarshalJSON(b) }

// UnmarshalText reads an RFC 3339 time (query and path parameters).
func (t *Timestamp) UnmarshalText(b []byte) error { return t.Time.UnmarshalText(b) }

// Bind reads a query or path parameter (oapi-codegen's runtime asks a
// Binder first; without it the runtime would read the embedded time as a
// date).
func (t *Timestamp) Bind(src string) error {
	v, err := time.Parse(time.RFC3339Nano, src)
	if err != nil {
		return err
	}
	t.Time = v
	return nil
}
