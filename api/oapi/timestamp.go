package oapi

import (
	"fmt"
	"strings"
	"time"
)

// LeapSecondError refuses a time written with second 60. RFC 3339 allows a
// leap second (23:59:60 on a day that has one), but the service stores times
// in UTC without leap seconds (PostgreSQL's timestamptz has none), so it
// could never be written back as given.
type LeapSecondError struct{ Value string }

func (e *LeapSecondError) Error() string {
	return "the time " + e.Value + " names a leap second (second 60), which the service cannot store; " +
		"give the instant as second 59 or as second 00 of the next minute"
}

// ParseTimestamp reads an RFC 3339 date-time as the contract allows it:
// the separator T and the zone Z in either case (RFC 3339 section 5.6 says
// they may be lower case), any number of fractional digits (cut to whole
// microseconds), an offset of at most 23:59. A leap second is a
// *LeapSecondError.
func ParseTimestamp(s string) (time.Time, error) {
	const secondAt = len("2006-01-02T15:04:")
	if len(s) > secondAt+1 && s[secondAt] == '6' && s[secondAt+1] == '0' && s[secondAt-1] == ':' && (s[10] == 'T' || s[10] == 't') {
		return time.Time{}, &LeapSecondError{Value: s}
	}
	if strings.IndexByte(s, ',') >= 0 { // time's reader takes a comma for the dot; RFC 3339 does not
		return time.Time{}, fmt.Errorf("%q is not an RFC 3339 date-time: fractional seconds follow a dot", s)
	}
	b := []byte(s)
	if len(b) > 10 && b[10] == 't' {
		b[10] = 'T'
	}
	if n := len(b); n > 0 && b[n-1] == 'z' {
		b[n-1] = 'Z'
	}
	var t time.Time
	// UnmarshalText is Go's strict RFC 3339 reader (two-digit fields, a
	// day that exists in its month); the offset's hours are checked below.
	if err := t.UnmarshalText(b); err != nil {
		return time.Time{}, fmt.Errorf("%q is not an RFC 3339 date-time", s)
	}
	if _, off := t.Zone(); off <= -24*3600 || off >= 24*3600 {
		return time.Time{}, fmt.Errorf("%q is not an RFC 3339 date-time: its offset's hours are 00 to 23", s)
	}
	// The instant the store will keep (whole microseconds, see
	// MarshalJSON), so that every rule judges the time that is stored.
	return t.Truncate(time.Microsecond), nil
}

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
	return t.UTC().Truncate(time.Microsecond).Format(TimestampLayout)
}

// MarshalJSON writes the time in UTC with six fractional digits, cut to the
// microsecond as the store keeps it (pgx sends a time to PostgreSQL as whole
// microseconds, dropping the nanoseconds below): an answer made from a time
// in memory says what a read of the stored time will say.
func (t Timestamp) MarshalJSON() ([]byte, error) {
	if y := t.UTC().Year(); y < 0 || y > 9999 {
		return nil, fmt.Errorf("oapi: timestamp year %d outside 0000-9999", y)
	}
	b := make([]byte, 0, len(TimestampLayout)+2)
	b = append(b, '"')
	b = t.UTC().Truncate(time.Microsecond).AppendFormat(b, TimestampLayout)
	return append(b, '"'), nil
}

// MarshalText writes what MarshalJSON writes, unquoted.
func (t Timestamp) MarshalText() ([]byte, error) { return []byte(t.String()), nil }

// UnmarshalJSON reads an RFC 3339 time (ParseTimestamp); null leaves t as
// it is, as for time.Time.
func (t *Timestamp) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		return nil
	}
	if len(b) < 2 || b[0] != '"' || b[len(b)-1] != '"' {
		return fmt.Errorf("oapi: a date-time is a JSON string, not %.20s", b)
	}
	return t.UnmarshalText(b[1 : len(b)-1])
}

// UnmarshalText reads an RFC 3339 time (ParseTimestamp).
func (t *Timestamp) UnmarshalText(b []byte) error {
	v, err := ParseTimestamp(string(b))
	if err != nil {
		return err
	}
	t.Time = v
	return nil
}

// Bind reads a query or path parameter (oapi-codegen's runtime asks a
// Binder first; without it the runtime would read the embedded time as a
// date).
func (t *Timestamp) Bind(src string) error {
	return t.UnmarshalText([]byte(src))
}
