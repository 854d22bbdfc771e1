package oapi

import (
	"encoding/json"
	"errors"
	"testing"
	"time"
)

// TestTimestampFixedPrecision: every time is written in UTC with exactly six
// fractional digits, whatever its zone and precision (RFC 3339 section 5.6
// allows any number of digits; the contract fixes six).
func TestTimestampFixedPrecision(t *testing.T) {
	plus2 := time.FixedZone("UTC+2", 2*3600)
	tests := []struct {
		name string
		in   time.Time
		want string
	}{
		{"whole second", time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC), `"2026-03-01T08:00:00.000000Z"`},
		{"milliseconds", time.Date(2026, 3, 1, 8, 0, 0, 500_000_000, time.UTC), `"2026-03-01T08:00:00.500000Z"`},
		// Cut, not rounded: the store keeps whole microseconds, dropping the
		// nanoseconds below (pgx's binary timestamptz), and an answer says
		// what a read will.
		{"nanoseconds cut at half", time.Date(2026, 3, 1, 8, 0, 0, 123_456_500, time.UTC), `"2026-03-01T08:00:00.123456Z"`},
		{"nanoseconds cut", time.Date(2026, 3, 1, 8, 0, 0, 123_456_999, time.UTC), `"2026-03-01T08:00:00.123456Z"`},
		{"other zone", time.Date(2026, 3, 1, 1, 30, 0, 0, plus2), `"2026-02-28T23:30:00.000000Z"`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			b, err := json.Marshal(struct{ At Timestamp }{NewTimestamp(tt.in)})
			if err != nil {
				t.Fatal(err)
			}
			if got := string(b); got != `{"At":`+tt.want+`}` {
				t.Errorf("got %s, want At %s", got, tt.want)
			}
			var back Timestamp
			if err := json.Unmarshal([]byte(tt.want), &back); err != nil {
				t.Fatal(err)
			}
			if !back.Equal(tt.in.Truncate(time.Microsecond)) {
				t.Errorf("read back %v, want %v", back.Time, tt.in)
			}
		})
	}
	if _, err := json.Marshal(NewTimestamp(time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC))); err == nil {
		t.Error("year 10000 written; RFC 3339 has four-digit years")
	}
}

// TestParseTimestamp: RFC 3339 section 5.6 lets T and Z be lower case; a
// leap second is a LeapSecondError; what time's strict reader refuses stays
// refused.
func TestParseTimestamp(t *testing.T) {
	want := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	for _, s := range []string{"2026-03-02T08:00:00Z", "2026-03-02t08:00:00z", "2026-03-02t09:00:00+01:00", "2026-03-02T08:00:00.000z"} {
		got, err := ParseTimestamp(s)
		if err != nil || !got.Equal(want) {
			t.Errorf("ParseTimestamp(%q) = %v, %v; want %v", s, got, err, want)
		}
	}
	// Cut to the microsecond the store keeps, as PostgreSQL holds a time
	// pgx sends (2001-01-01T00:00:00.0000015Z is stored as .000001).
	if got, err := ParseTimestamp("2001-01-01T00:00:00.0000015Z"); err != nil || got.Nanosecond() != 1000 {
		t.Errorf("ParseTimestamp(.0000015) = %v, %v; want .000001", got, err)
	}
	for _, s := range []string{"2016-12-31T23:59:60Z", "2016-12-31t23:59:60.5+00:00"} {
		var leap *LeapSecondError
		if _, err := ParseTimestamp(s); !errors.As(err, &leap) {
			t.Errorf("ParseTimestamp(%q): %v, want a LeapSecondError", s, err)
		}
	}
	for _, s := range []string{"2026-03-02 08:00:00Z", "2026-02-30T08:00:00Z", "2026-03-02T08:00:00+24:00", "2026-03-02T08:00:00,5Z", "2026-03-02T08:00:00", "2026-03-02x08:00:00Z"} {
		if _, err := ParseTimestamp(s); err == nil {
			t.Errorf("ParseTimestamp(%q) accepted", s)
		}
	}
}
