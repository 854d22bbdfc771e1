package lab

import (
	"time"
)

// The instants a client may name: every timestamp the service accepts
// (bodies, CSV runs, query parameters) must lie in years 1 to 9999 once
// converted to UTC, the range RFC 3339 and the JSON encoding of a time can
// write. An offset can carry a time written as 9999-12-31 past the end
// (9999-12-31T23:59:59-14:00) or one written as 0000-01-01 before the start
// (0000-01-01T00:00:00+14:00); stored, it could never be read back.
var (
	MinTimestamp = time.Date(1, 1, 1, 0, 0, 0, 0, time.UTC)
	MaxTimestamp = time.Date(9999, 12, 31, 23, 59, 59, 999999999, time.UTC)
)

// DefaultFutureSkew is how far ahead of its receipt a client's claimed time
// (a run's or late sample's acquired_at, a verification's at) may lie.
// Instrument clocks drift and are often set to local time while labelled
// UTC; the widest such error is the span of the world's offsets (UTC−12 to
// UTC+14, 26 h), so a day keeps every honest mislabelled clock except the
// rarest while refusing the dates that would otherwise decide release
// (a verification dated years ahead holds every later sample, a run dated
// ahead becomes the newest curve). A lab whose instruments keep true UTC may
// narrow it (CURVEKEEPER_CLOCK_SKEW).
const DefaultFutureSkew = 24 * time.Hour

// CheckTimestamp refuses t when it leaves years 1 to 9999 in UTC; field
// names it (a JSON pointer, or "/" and the parameter's name) in place in.
func CheckTimestamp(in Place, field string, t time.Time) error {
	if t.Before(MinTimestamp) || t.After(MaxTimestamp) {
		return &Error{Kind: KindInvalid, In: in, Field: field,
			Message: "the time " + t.Format(time.RFC3339Nano) + " lies outside years 0001 to 9999 once converted to UTC"}
	}
	return nil
}

// Option sets an optional part of a Service.
type Option func(*Service)

// WithClock makes now the Service's clock: the receipt time against which
// claimed times are bounded. The default is time.Now; tests pass a fixed
// time.
func WithClock(now func() time.Time) Option { return func(s *Service) { s.now = now } }

// WithFutureSkew sets how far ahead of receipt a claimed time may lie
// (DefaultFutureSkew when d <= 0).
func WithFutureSkew(d time.Duration) Option {
	return func(s *Service) {
		if d > 0 {
			s.skew = d
		}
	}
}

// Now is the Service's clock.
func (s *Service) Now() time.Time { return s.now() }

// FutureSkew is how far ahead of receipt a claimed time may lie.
func (s *Service) FutureSkew() time.Duration { return s.skew }

// checkClaimed refuses a time a client claims for a measurement when it is
// not representable (CheckTimestamp) or lies more than the allowed skew
// after received, the time the request was received.
func (s *Service) checkClaimed(in Place, field string, t, received time.Time) error {
	if err := CheckTimestamp(in, field, t); err != nil {
		return err
	}
	if limit := received.Add(s.skew); t.After(limit) {
		return &Error{Kind: KindInvalid, In: in, Field: field,
			Message: "the time " + t.UTC().Format(time.RFC3339Nano) + " lies more than " + s.skew.String() +
				" after the request was received (" + received.UTC().Format(time.RFC3339) + "); a measurement is not dated in the future"}
	}
	return nil
}

// CheckQueryTimes checks query parameters given as name, time pairs (a zero
// time is a parameter not given) with CheckTimestamp.
func CheckQueryTimes(pairs ...any) error {
	for i := 0; i+1 < len(pairs); i += 2 {
		name, _ := pairs[i].(string)
		t, _ := pairs[i+1].(time.Time)
		if t.IsZero() {
			continue
		}
		if err := CheckTimestamp(InQuery, "/"+name, t); err != nil {
			return err
		}
	}
	return nil
}
