package api

import (
	"testing"
	"time"
)

// TestTokenLimiter drives one token's bucket on a fixed clock: burst 3 at
// 2 requests per second admits 3 at once, refuses the 4th with the wait
// until the next token (0.5 s), refills by the rate, keeps tokens apart,
// and a refused request takes nothing from the bucket.
func TestTokenLimiter(t *testing.T) {
	l := newTokenLimiter(2, 3)
	t0 := time.Unix(1_700_000_000, 0)
	for i := range 3 {
		if ok, _ := l.allow("a", t0); !ok {
			t.Fatalf("request %d of the burst refused", i+1)
		}
	}
	ok, wait := l.allow("a", t0)
	if ok {
		t.Fatal("4th request at once admitted, want refused")
	}
	if want := 500 * time.Millisecond; wait != want {
		t.Errorf("wait = %v, want %v", wait, want)
	}
	if ok, _ := l.allow("b", t0); !ok {
		t.Error("another token's first request refused")
	}
	// Refusals do not consume: after 0.5 s exactly one request passes.
	for range 5 {
		l.allow("a", t0.Add(100*time.Millisecond))
	}
	if ok, _ := l.allow("a", t0.Add(500*time.Millisecond)); !ok {
		t.Error("request after 0.5 s refused, want admitted")
	}
	if ok, _ := l.allow("a", t0.Add(500*time.Millisecond)); ok {
		t.Error("second request after 0.5 s admitted, want refused")
	}
}

// TestTokenLimiterSweep: buckets that have refilled are forgotten once the
// map grows past its sweep size, and busy ones are kept.
func TestTokenLimiterSweep(t *testing.T) {
	l := newTokenLimiter(1, 2)
	t0 := time.Unix(1_700_000_000, 0)
	l.allow("busy", t0)
	l.allow("busy", t0)
	for i := range 1100 {
		l.allow(string(rune('A'+i%26))+time.Duration(i).String(), t0.Add(10*time.Second))
	}
	if n := len(l.buckets); n > 1100 {
		t.Errorf("%d buckets after a sweep, want ≤ 1100", n)
	}
	// "busy" refilled by t0+10s, so it may have been swept; an empty one
	// must survive: drain one and sweep at the same instant.
	l2 := newTokenLimiter(1, 2)
	l2.sweepAt = 2
	l2.allow("x", t0)
	l2.allow("x", t0)
	l2.allow("y", t0)
	l2.allow("z", t0) // sweeps: x empty, y half full: both kept
	if ok, _ := l2.allow("x", t0); ok {
		t.Error("drained bucket forgotten by the sweep: request admitted")
	}
}
