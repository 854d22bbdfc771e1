package oapi

import (
	"encoding/json"
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
		{"nanoseconds round half up", time.Date(2026, 3, 1, 8, 0, 0, 123_456_500, time.UTC), `"2026-03-01T08:00:00.123457Z"`},
		{"nanoseconds round down", time.Date(2026, 3, 1, 8, 0, 0, 123_456_499, time.UTC), `"2026-03-01T08:00:00.123456Z"`},
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
			if !back.Equal(tt.in.Round(time.Microsecond)) {
				t.Errorf("read back %v, want %v", back.Time, tt.in)
			}
		})
	}
	if _, err := json.Marshal(NewTimestamp(time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC))); err == nil {
		t.Error("year 10000 written; RFC 3339 has four-digit years")
	}
}
